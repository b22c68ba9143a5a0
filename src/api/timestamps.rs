//! How the service writes the times it keeps (`stored_at`, a stored `as_of`).

use chrono::{DateTime, SecondsFormat, Utc};

/// RFC 3339 with microseconds, UTC (`Z`), as every stored time is shown.
pub fn rfc3339(t: DateTime<Utc>) -> String {
    t.to_rfc3339_opts(SecondsFormat::AutoSi, true)
}
