//! logstrip: model-free variance, gamma and leverage swap term structures from
//! option smiles by log-strip replication, the forward-variance curve, and a fast
//! rough Heston (or Heston) fit to the leverage swaps.
//!
//! Layers: [`analytics`] is the pure numerical core; [`wire`] holds the JSON
//! formats (raw input types, validation into analytics types, output types);
//! [`store`] keeps the history of analyses (SQLite or PostgreSQL); [`api`] is the
//! HTTP service; [`cli`] implements the subcommands on top.

pub mod analytics;
pub mod api;
pub mod chart_drawing;
pub mod cli;
pub mod ingest;
pub mod smile_drawing;
pub mod store;
pub mod time_chart;
pub mod wire;
