//! Input documents: a snapshot of smiles (`logstrip analyze`) or a list of swap
//! levels (`logstrip fit`), parsed strictly (unknown fields are errors, so a typo
//! never silently changes a result) and validated into analytics types.

use super::path::{FieldPath, InputErrors, Problem, Segment};
use crate::analytics::analysis::AnalyzeOptions;
use crate::analytics::calibrate::{FitSpec, LeverageTarget, ModelKind, ParamName};
use crate::analytics::slice::{PriceQuote, Slice, SliceError, VolQuote};
use crate::analytics::smile::SmileMethod;
use chrono::{DateTime, Utc};
use serde::Deserialize;

/// A snapshot of option smiles, as written by users.
#[derive(Debug, Clone, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct SnapshotDoc {
    /// Name of the underlying (free text).
    pub underlying: String,
    /// Valuation time, RFC 3339.
    pub as_of: String,
    /// Spot level (informational).
    #[serde(default)]
    pub spot: Option<f64>,
    /// One entry per expiry, at most 200 (`MAX_EXPIRIES`).
    #[serde(deserialize_with = "super::strict::objects")]
    #[schema(min_items = 1, max_items = 200)]
    pub slices: Vec<SliceDoc>,
    /// Smile method: `svi_spline` (default), `svi` or `monotone`.
    #[serde(default)]
    pub smile: Option<SmileMethodDoc>,
    /// Model fit request; absent means a free rough Heston fit.
    #[serde(default, deserialize_with = "super::strict::optional_object")]
    pub fit: Option<FitDoc>,
}

/// One expiry.
#[derive(Debug, Clone, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct SliceDoc {
    /// Expiry time, RFC 3339 (or give `tau`).
    #[serde(default)]
    pub expiry: Option<String>,
    /// Time to expiry in years (or give `expiry`).
    #[serde(default)]
    pub tau: Option<f64>,
    /// Forward; may be omitted with `prices` (then implied by put-call parity).
    #[serde(default)]
    pub forward: Option<f64>,
    /// Discount factor to expiry, default 1.
    #[serde(default)]
    pub discount: Option<f64>,
    /// Implied vol quotes.
    #[serde(default, deserialize_with = "super::strict::optional_objects")]
    pub points: Option<Vec<PointDoc>>,
    /// Discounted call/put mids.
    #[serde(default, deserialize_with = "super::strict::optional_objects")]
    pub prices: Option<Vec<PriceDoc>>,
}

/// An implied-vol quote.
#[derive(Debug, Clone, Copy, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct PointDoc {
    /// Strike.
    pub strike: f64,
    /// Implied vol, decimal.
    pub vol: f64,
    /// Bid vol.
    #[serde(default)]
    pub bid: Option<f64>,
    /// Ask vol.
    #[serde(default)]
    pub ask: Option<f64>,
}

/// A price quote.
#[derive(Debug, Clone, Copy, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct PriceDoc {
    /// Strike.
    pub strike: f64,
    /// Discounted call mid.
    #[serde(default)]
    pub call: Option<f64>,
    /// Discounted put mid.
    #[serde(default)]
    pub put: Option<f64>,
}

/// Smile method names.
#[derive(Debug, Clone, Copy, Deserialize, PartialEq, Eq, utoipa::ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum SmileMethodDoc {
    /// SVI plus a cross-validated smoothing spline of its residuals, square-root wings
    /// (the default).
    SviSpline,
    /// Raw SVI alone.
    Svi,
    /// Monotone cubic.
    Monotone,
}

/// Model names.
#[derive(Debug, Clone, Copy, Deserialize, PartialEq, Eq, utoipa::ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum ModelDoc {
    /// Rough Heston.
    RoughHeston,
    /// Classical Heston.
    Heston,
    /// No fit.
    None,
}

/// Fit request.
#[derive(Debug, Clone, Deserialize, Default, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct FitDoc {
    /// Model; default `rough_heston`.
    #[serde(default)]
    pub model: Option<ModelDoc>,
    /// Parameters held fixed.
    #[serde(default, deserialize_with = "super::strict::optional_object")]
    pub fix: Option<FixDoc>,
    /// Vol-of-vol for the convexity report; positive.
    #[serde(default)]
    #[schema(exclusive_minimum = 0.0)]
    pub nu: Option<f64>,
}

/// Fixed parameter values, each within its search range (`ParamName::bounds`; the
/// schema states the same bounds, and a test holds them equal).
#[derive(Debug, Clone, Copy, Deserialize, Default, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct FixDoc {
    /// Hurst exponent.
    #[serde(default)]
    #[schema(minimum = 0.01, maximum = 0.5)]
    pub hurst: Option<f64>,
    /// `rho * nu`.
    #[serde(default)]
    #[schema(minimum = -5.0, maximum = 0.5)]
    pub rho_nu: Option<f64>,
    /// Mean reversion.
    #[serde(default)]
    #[schema(minimum = 0.0, maximum = 20.0)]
    pub mean_reversion: Option<f64>,
}

/// Swap levels for `logstrip fit`.
#[derive(Debug, Clone, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct SwapsDoc {
    /// Name of the underlying.
    pub underlying: String,
    /// Valuation time, RFC 3339.
    pub as_of: String,
    /// Spot level (informational).
    #[serde(default)]
    pub spot: Option<f64>,
    /// One entry per expiry, at most 200 (`MAX_EXPIRIES`).
    #[serde(deserialize_with = "super::strict::objects")]
    #[schema(min_items = 1, max_items = 200)]
    pub swaps: Vec<SwapDoc>,
    /// Fit request.
    #[serde(default, deserialize_with = "super::strict::optional_object")]
    pub fit: Option<FitDoc>,
}

/// Swap levels at one expiry.
#[derive(Debug, Clone, Deserialize, utoipa::ToSchema)]
#[serde(deny_unknown_fields)]
pub struct SwapDoc {
    /// Expiry time, RFC 3339 (or give `tau`).
    #[serde(default)]
    pub expiry: Option<String>,
    /// Time to expiry in years.
    #[serde(default)]
    pub tau: Option<f64>,
    /// Variance swap level, annualised variance.
    pub variance_swap: f64,
    /// Gamma swap level (or give `leverage_swap`).
    #[serde(default)]
    pub gamma_swap: Option<f64>,
    /// Leverage swap level (or give `gamma_swap`).
    #[serde(default)]
    pub leverage_swap: Option<f64>,
}

/// A validated snapshot, ready for [`crate::analytics::analysis::analyze`].
#[derive(Debug, Clone)]
pub struct ValidSnapshot {
    /// Underlying name.
    pub underlying: String,
    /// Valuation time.
    pub as_of: DateTime<Utc>,
    /// Spot, if given.
    pub spot: Option<f64>,
    /// Slices in input order.
    pub slices: Vec<Slice>,
    /// Expiry label per slice (input order), when given as a date.
    pub expiries: Vec<Option<String>>,
    /// Analysis options.
    pub options: AnalyzeOptions,
}

/// Validated swap levels, ready for the fit.
#[derive(Debug, Clone)]
pub struct ValidSwaps {
    /// Underlying name.
    pub underlying: String,
    /// Valuation time.
    pub as_of: DateTime<Utc>,
    /// Spot, if given.
    pub spot: Option<f64>,
    /// Levels sorted by expiry.
    pub target: LeverageTarget,
    /// Gamma swap levels matching `target`.
    pub gamma_swap: Vec<f64>,
    /// Expiry labels matching `target`.
    pub expiries: Vec<Option<String>>,
    /// Fit request; `None` when the model is `none`.
    pub fit: Option<FitSpec>,
}

/// Parses a JSON document into `T` strictly (an object at the root), reporting the
/// failing field's path; syntax errors are [`InputErrorKind::Malformed`](super::path::InputErrorKind).
///
/// # Errors
/// [`InputErrors`] with the path of the failing field.
pub fn parse_json<T: for<'de> Deserialize<'de>>(text: &str) -> Result<T, InputErrors> {
    // serde would also read a struct from a JSON array (fields by position); a
    // document must be an object with named fields.
    if !text.trim_start().starts_with('{') {
        let message = "must be a JSON object (a document starting with '{')";
        return Err(match serde_json::from_str::<serde::de::IgnoredAny>(text) {
            Ok(_) => InputErrors::one(FieldPath::root(), message),
            Err(e) => InputErrors::malformed(FieldPath::root(), format!("{message}: {e}")),
        });
    }
    // Tracking the path allocates for every field (reading the 35 x 60 demo snapshot took
    // 11.0 million instructions with it, 5.9 million without; the analysis takes 11.4), so a document
    // is first read plainly, and only a failing one again with tracking, for the path of
    // its first error (the same error: tracking does not change what is accepted).
    if let Ok(value) = serde_json::from_str::<T>(text) {
        return Ok(value);
    }
    let mut de = serde_json::Deserializer::from_str(text);
    let parsed: Result<T, _> = serde_path_to_error::deserialize(&mut de);
    let value = parsed.map_err(|err| {
        let path = FieldPath(
            err.path()
                .iter()
                .filter_map(|s| match s {
                    serde_path_to_error::Segment::Seq { index } => Some(Segment::Index(*index)),
                    serde_path_to_error::Segment::Map { key } => Some(Segment::Field(key.clone())),
                    serde_path_to_error::Segment::Enum { variant } => Some(Segment::Field(variant.clone())),
                    serde_path_to_error::Segment::Unknown => None,
                })
                .collect(),
        );
        let inner = err.into_inner();
        match inner.classify() {
            serde_json::error::Category::Data => {
                let (path, message) = name_the_field(path, &inner.to_string());
                InputErrors::one(path, message)
            }
            _ => InputErrors::malformed(path, inner.to_string()),
        }
    })?;
    de.end().map_err(|e| InputErrors::malformed(FieldPath::root(), e.to_string()))?;
    Ok(value)
}

/// A missing field named in the path rather than in the parser's wording: serde
/// reports it at the enclosing object (`missing field \`as_of\` at line 1 column
/// 145300`), so the field joins the path and the message says what is wrong with it,
/// without the parser's position. (An unknown field is already in the path.)
fn name_the_field(mut path: FieldPath, message: &str) -> (FieldPath, String) {
    let field_of = |prefix: &str| -> Option<String> {
        let rest = message.strip_prefix(prefix)?;
        let end = rest.find('`')?;
        Some(rest[..end].to_string())
    };
    if let Some(field) = field_of("missing field `") {
        path.0.push(Segment::Field(field));
        return (path, "is required".to_string());
    }
    (path, message.to_string())
}

/// Collects problems while validating.
#[derive(Default)]
struct Problems(Vec<Problem>);

impl Problems {
    fn push(&mut self, path: FieldPath, message: impl Into<String>) {
        self.0.push(Problem { path, message: message.into() });
    }
    fn finish<T>(self, value: T) -> Result<T, InputErrors> {
        if self.0.is_empty() {
            Ok(value)
        } else {
            Err(InputErrors::from_problems(self.0))
        }
    }
}

/// ACT/365F year fraction from `as_of` to `expiry`.
pub fn year_fraction(as_of: DateTime<Utc>, expiry: DateTime<Utc>) -> f64 {
    let seconds = (expiry - as_of).num_milliseconds() as f64 / 1000.0;
    seconds / (365.0 * 86_400.0)
}

fn parse_time(text: &str, path: FieldPath, problems: &mut Problems) -> Option<DateTime<Utc>> {
    super::time::parse_utc(text).map_err(|message| problems.push(path, message)).ok()
}

/// Most expiries one snapshot or swap set may carry. The fit's work grows faster than the
/// square of the expiry count (measured, release build, one core: 35 expiries 0.15 ms,
/// 150 expiries to 3 years 0.23 s, 250 expiries to 30 years 0.75 s), and listed index
/// options carry well under 100 expiries, so this bounds the CPU one request can take
/// without refusing a real book. Found by fuzzing (`tests/regressions.rs`).
pub const MAX_EXPIRIES: usize = 200;

/// The message for a document over [`MAX_EXPIRIES`].
pub(crate) fn too_many_expiries(count: usize) -> String {
    format!("at most {MAX_EXPIRIES} expiries per document, got {count}; split it into several")
}

/// Longest underlying name, in characters (not bytes).
pub const MAX_UNDERLYING_CHARS: usize = 200;

/// What is wrong with an underlying name, if anything: empty, longer than
/// [`MAX_UNDERLYING_CHARS`] characters, or holding a control character (NUL, line
/// breaks, ...), which no store keeps alike and no log shows plainly.
pub fn underlying_problem(name: &str) -> Option<String> {
    if name.trim().is_empty() {
        return Some("must not be empty".into());
    }
    let count = name.chars().count();
    if count > MAX_UNDERLYING_CHARS {
        return Some(format!("must be at most {MAX_UNDERLYING_CHARS} characters, got {count}"));
    }
    name.chars()
        .enumerate()
        .find(|(_, c)| c.is_control())
        .map(|(i, c)| format!("must not contain control characters, got U+{:04X} at character {}", u32::from(c), i + 1))
}

fn header(underlying: &str, as_of: &str, spot: Option<f64>, problems: &mut Problems) -> Option<DateTime<Utc>> {
    let root = FieldPath::root();
    if let Some(message) = underlying_problem(underlying) {
        problems.push(root.field("underlying"), message);
    }
    if let Some(s) = spot {
        if !(s.is_finite() && s > 0.0) {
            problems.push(root.field("spot"), format!("must be positive, got {s}"));
        }
    }
    parse_time(as_of, root.field("as_of"), problems)
}

/// Resolves `expiry`/`tau` of an entry into years.
fn resolve_tau(
    expiry: Option<&str>,
    tau: Option<f64>,
    as_of: Option<DateTime<Utc>>,
    path: &FieldPath,
    problems: &mut Problems,
) -> Option<f64> {
    match (expiry, tau) {
        (Some(_), Some(_)) => {
            problems.push(path.field("tau"), "give either expiry or tau, not both");
            None
        }
        (None, None) => {
            problems.push(path.field("tau"), "give expiry (RFC 3339) or tau (years)");
            None
        }
        (None, Some(t)) => {
            if t.is_finite() && t > 0.0 {
                Some(t)
            } else {
                problems.push(path.field("tau"), format!("must be positive, got {t}"));
                None
            }
        }
        (Some(text), None) => {
            let expiry = parse_time(text, path.field("expiry"), problems)?;
            let t = year_fraction(as_of?, expiry);
            if t > 0.0 {
                Some(t)
            } else {
                problems.push(path.field("expiry"), format!("must be after as_of, got {text}"));
                None
            }
        }
    }
}

fn fit_spec(doc: Option<&FitDoc>, problems: &mut Problems) -> Option<FitSpec> {
    let default = FitDoc::default();
    let doc = doc.unwrap_or(&default);
    let path = FieldPath::root().field("fit");
    let model = match doc.model.unwrap_or(ModelDoc::RoughHeston) {
        ModelDoc::None => return None,
        ModelDoc::RoughHeston => ModelKind::RoughHeston,
        ModelDoc::Heston => ModelKind::Heston,
    };
    let fix = doc.fix.unwrap_or_default();
    let fix_path = path.field("fix");
    let mut check = |name: ParamName, v: Option<f64>| -> Option<f64> {
        let v = v?;
        let (lo, hi) = name.bounds();
        if !(v.is_finite() && v >= lo && v <= hi) {
            problems.push(fix_path.field(name.as_str()), format!("must lie in [{lo}, {hi}], got {v}"));
            return None;
        }
        Some(v)
    };
    let hurst = check(ParamName::Hurst, fix.hurst);
    let rho_nu = check(ParamName::RhoNu, fix.rho_nu);
    let mean_reversion = check(ParamName::MeanReversion, fix.mean_reversion);
    if model == ModelKind::Heston && fix.hurst.is_some() {
        problems.push(fix_path.field("hurst"), "classical Heston has no Hurst parameter (it is 1/2)");
    }
    if let Some(nu) = doc.nu {
        if !(nu.is_finite() && nu > 0.0) {
            problems.push(path.field("nu"), format!("must be positive, got {nu}"));
        } else if let Some(c) = rho_nu.filter(|c| c.abs() > nu) {
            problems.push(
                fix_path.field("rho_nu"),
                format!("with nu {nu} gives a correlation rho = rho_nu / nu = {} outside [-1, 1]", c / nu),
            );
        }
    }
    Some(FitSpec { model: Some(model), hurst, rho_nu, mean_reversion, nu: doc.nu, ..FitSpec::default() })
}

fn slice_problem(e: SliceError, slice_path: &FieldPath, quotes_field: &str, problems: &mut Problems) {
    match e {
        SliceError::Field { field, message } => problems.push(slice_path.field(field), message),
        SliceError::Quote { index, field, message } => {
            problems.push(slice_path.field(quotes_field).index(index).field(field), message)
        }
        SliceError::TooFewQuotes(n) => {
            problems.push(slice_path.field(quotes_field), format!("needs at least 3 usable quotes, got {n}"))
        }
    }
}

/// One slice built from its points or prices; `None`, with its problems, when it cannot
/// be. A missing `tau` was reported already: the rest is validated with a placeholder.
fn build_slice(s: &SliceDoc, tau: Option<f64>, path: &FieldPath, problems: &mut Problems) -> Option<Slice> {
    let discount = s.discount.unwrap_or(1.0);
    let built = match (&s.points, &s.prices) {
        (Some(_), Some(_)) => {
            problems.push(path.field("prices"), "give points or prices, not both");
            return None;
        }
        (None, None) => {
            problems.push(path.field("points"), "give points (implied vols) or prices (call/put mids)");
            return None;
        }
        (Some(points), None) => {
            let Some(forward) = s.forward else {
                problems.push(path.field("forward"), "required with points (it can be implied only from prices)");
                return None;
            };
            let quotes: Vec<VolQuote> =
                points.iter().map(|p| VolQuote { strike: p.strike, vol: p.vol, bid: p.bid, ask: p.ask }).collect();
            Slice::from_vols(tau.unwrap_or(1.0), forward, discount, &quotes).map_err(|e| (e, "points"))
        }
        (None, Some(prices)) => {
            let quotes: Vec<PriceQuote> =
                prices.iter().map(|p| PriceQuote { strike: p.strike, call: p.call, put: p.put }).collect();
            Slice::from_prices(tau.unwrap_or(1.0), s.forward, discount, &quotes).map_err(|e| (e, "prices"))
        }
    };
    match built {
        Ok(slice) => Some(slice),
        Err((errors, field)) => {
            for e in errors {
                slice_problem(e, path, field, problems);
            }
            None
        }
    }
}

/// Reports the entries of `list` with the same time to expiry to within a millisecond,
/// at the later index; `sorted` holds each entry's time to expiry and index, in time
/// order.
fn same_expiries(sorted: &[(f64, usize)], list: &str, problems: &mut Problems) {
    let root = FieldPath::root().field(list);
    for pair in sorted.windows(2) {
        if (pair[1].0 - pair[0].0).abs() < 1e-3 / (365.0 * 86_400.0) {
            let (first, second) = (pair[0].1.min(pair[1].1), pair[0].1.max(pair[1].1));
            problems.push(root.index(second).field("tau"), format!("same expiry as {list}[{first}]"));
        }
    }
}

/// Parses and validates a snapshot document.
///
/// # Errors
/// [`InputErrors`] listing every problem with its field path.
pub fn parse_snapshot(text: &str) -> Result<ValidSnapshot, InputErrors> {
    let doc: SnapshotDoc = parse_json(text)?;
    validate_snapshot(&doc)
}

/// Validates a parsed snapshot.
///
/// # Errors
/// [`InputErrors`] listing every problem with its field path.
pub fn validate_snapshot(doc: &SnapshotDoc) -> Result<ValidSnapshot, InputErrors> {
    let mut problems = Problems::default();
    let as_of = header(&doc.underlying, &doc.as_of, doc.spot, &mut problems);
    let root = FieldPath::root();
    if doc.slices.is_empty() {
        problems.push(root.field("slices"), "needs at least one slice");
    } else if doc.slices.len() > MAX_EXPIRIES {
        problems.push(root.field("slices"), too_many_expiries(doc.slices.len()));
        return Err(InputErrors::from_problems(problems.0));
    }
    let mut slices = Vec::with_capacity(doc.slices.len());
    let mut taus: Vec<(f64, usize)> = Vec::new();
    for (i, s) in doc.slices.iter().enumerate() {
        let path = root.field("slices").index(i);
        let tau = resolve_tau(s.expiry.as_deref(), s.tau, as_of, &path, &mut problems);
        if let (Some(slice), Some(t)) = (build_slice(s, tau, &path, &mut problems), tau) {
            taus.push((t, i));
            slices.push(slice);
        }
    }
    taus.sort_by(|a, b| a.0.total_cmp(&b.0));
    same_expiries(&taus, "slices", &mut problems);
    let smile = match doc.smile {
        Some(SmileMethodDoc::Monotone) => SmileMethod::Monotone,
        Some(SmileMethodDoc::SviSpline) => SmileMethod::SviSpline,
        Some(SmileMethodDoc::Svi) => SmileMethod::Svi,
        None => SmileMethod::default(),
    };
    let fit = fit_spec(doc.fit.as_ref(), &mut problems);
    let expiries = doc.slices.iter().map(|s| s.expiry.clone()).collect();
    let Some(as_of) = as_of else {
        return Err(InputErrors::from_problems(problems.0));
    };
    problems.finish(ValidSnapshot {
        underlying: doc.underlying.clone(),
        as_of,
        spot: doc.spot,
        slices,
        expiries,
        options: AnalyzeOptions { smile, fit },
    })
}

/// Parses and validates a swap-levels document.
///
/// # Errors
/// [`InputErrors`] listing every problem with its field path.
pub fn parse_swaps(text: &str) -> Result<ValidSwaps, InputErrors> {
    let doc: SwapsDoc = parse_json(text)?;
    let mut problems = Problems::default();
    let as_of = header(&doc.underlying, &doc.as_of, doc.spot, &mut problems);
    let root = FieldPath::root();
    if doc.swaps.is_empty() {
        problems.push(root.field("swaps"), "needs at least one expiry");
    } else if doc.swaps.len() > MAX_EXPIRIES {
        problems.push(root.field("swaps"), too_many_expiries(doc.swaps.len()));
        return Err(InputErrors::from_problems(problems.0));
    }
    let mut rows: Vec<(f64, f64, f64, f64, Option<String>, usize)> = Vec::new();
    for (i, s) in doc.swaps.iter().enumerate() {
        let path = root.field("swaps").index(i);
        let tau = resolve_tau(s.expiry.as_deref(), s.tau, as_of, &path, &mut problems);
        let vs = s.variance_swap;
        if !(vs.is_finite() && vs > 0.0) {
            problems.push(path.field("variance_swap"), format!("must be positive, got {vs}"));
        }
        let (gs, ls) = match (s.gamma_swap, s.leverage_swap) {
            (Some(_), Some(_)) => {
                problems.push(path.field("leverage_swap"), "give gamma_swap or leverage_swap, not both");
                continue;
            }
            (None, None) => {
                problems.push(path.field("gamma_swap"), "give gamma_swap or leverage_swap");
                continue;
            }
            (Some(g), None) => {
                if !(g.is_finite() && g > 0.0) {
                    problems.push(path.field("gamma_swap"), format!("must be positive, got {g}"));
                }
                (g, g - vs)
            }
            (None, Some(l)) => {
                if !l.is_finite() {
                    problems.push(path.field("leverage_swap"), format!("must be a finite number, got {l}"));
                }
                (vs + l, l)
            }
        };
        if let Some(t) = tau {
            rows.push((t, vs, gs, ls, s.expiry.clone(), i));
        }
    }
    rows.sort_by(|a, b| a.0.total_cmp(&b.0));
    let taus: Vec<(f64, usize)> = rows.iter().map(|r| (r.0, r.5)).collect();
    same_expiries(&taus, "swaps", &mut problems);
    let fit = fit_spec(doc.fit.as_ref(), &mut problems);
    let Some(as_of) = as_of else {
        return Err(InputErrors::from_problems(problems.0));
    };
    problems.finish(ValidSwaps {
        underlying: doc.underlying.clone(),
        as_of,
        spot: doc.spot,
        target: LeverageTarget {
            taus: rows.iter().map(|r| r.0).collect(),
            variance_swap: rows.iter().map(|r| r.1).collect(),
            leverage_swap: rows.iter().map(|r| r.3).collect(),
            uncertainty: None,
        },
        gamma_swap: rows.iter().map(|r| r.2).collect(),
        expiries: rows.iter().map(|r| r.4.clone()).collect(),
        fit,
    })
}
