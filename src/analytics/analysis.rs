//! The whole analysis of a snapshot: smiles, swap levels, quality, forward
//! variance, and the model fit to the leverage swaps.

use super::calibrate::{fit_leverage, FitOutcome, FitSpec, LeverageTarget};
use super::replication::{replicate, Replication};
use super::slice::Slice;
use super::smile::delta_levels::{delta_levels, DeltaLevels};
use super::smile::{fit_smiles, ButterflyViolation, FittedSmile, SmileError, SmileMethod, SmileQuote};
use super::term::TermStructure;
use super::tolerances::CALENDAR_TOTAL_VARIANCE_TOL;
use super::uncertainty::{level_errors, LevelErrors};

/// Share of the variance swap from beyond the quoted strikes above which a slice is
/// flagged as resting on its wings (common practice, no source).
pub const WIDE_WING_SHARE: f64 = 0.10;

/// Two standard errors of the variance-swap vol above which a slice is flagged as
/// uncertain, in vol points (rule of thumb, no source: a desk quotes variance swaps to
/// a few tenths of a vol point).
pub const UNCERTAIN_VOL_POINTS: f64 = 0.5;

/// Options of an analysis.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct AnalyzeOptions {
    /// How smiles are built.
    pub smile: SmileMethod,
    /// The model fit; `None` skips it.
    pub fit: Option<FitSpec>,
}

/// One expiry's results.
#[derive(Debug, Clone, PartialEq)]
pub struct SliceAnalysis {
    /// Position of the slice in the input.
    pub input_index: usize,
    /// Time to expiry (years).
    pub tau: f64,
    /// Forward.
    pub forward: f64,
    /// Discount factor.
    pub discount: f64,
    /// The fitted smile.
    pub smile: FittedSmile,
    /// Swap levels and integration diagnostics.
    pub replication: Replication,
    /// Standard errors of the levels (`None` for the monotone cubic smile).
    pub level_errors: Option<LevelErrors>,
    /// Forward variance on the period ending at this expiry.
    pub forward_variance: f64,
    /// Butterfly arbitrage found on the smile, if any.
    pub butterfly: Option<ButterflyViolation>,
    /// False when this expiry's total variance falls below the previous one's.
    pub calendar_ok: bool,
    /// At-the-money vol and 25-delta skew of the fitted smile (`None` when they cannot
    /// be read off it).
    pub delta_levels: Option<DeltaLevels>,
    /// Usable quotes.
    pub points: usize,
    /// The fitted smile's vol at each usable quote's strike (decimal), in quote order.
    pub fitted_vols: Vec<f64>,
    /// Quotes left out of the smile or kept but suspect, by strike.
    pub flagged_quotes: Vec<FlaggedQuote>,
    /// Everything suspect about this slice, in words.
    pub warnings: Vec<String>,
}

/// Why a quote is named.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FlagReason {
    /// Left out of the fit: off-market (stale, or a typing error).
    LeftOut,
    /// Kept, but further from the fitted smile than its half spreads allow.
    Suspect,
}

/// A quote the smile fit names, with where it sits against the fit.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FlaggedQuote {
    /// Position of the quote among the slice's usable quotes.
    pub index: usize,
    /// Strike.
    pub strike: f64,
    /// Quoted implied vol (decimal).
    pub vol: f64,
    /// The fitted smile's vol there (decimal).
    pub fitted_vol: f64,
    /// Half the bid/ask spread in vol, when quoted.
    pub half_spread: Option<f64>,
    /// Why it is named.
    pub reason: FlagReason,
}

/// The analysis of a snapshot, slices sorted by expiry.
#[derive(Debug, Clone, PartialEq)]
pub struct Analysis {
    /// Per-expiry results, by increasing `tau`.
    pub slices: Vec<SliceAnalysis>,
    /// The model fit, if requested.
    pub fit: Option<FitOutcome>,
}

/// Why an analysis could not be done.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum AnalysisError {
    /// A slice's smile could not be fitted.
    #[error("slice {index}: {source}")]
    Smile {
        /// Input position of the slice.
        index: usize,
        /// Why.
        source: SmileError,
    },
    /// Two slices share an expiry.
    #[error("slices {first} and {second} have the same expiry")]
    DuplicateExpiry {
        /// Input position of the first.
        first: usize,
        /// Input position of the second.
        second: usize,
    },
    /// No slices.
    #[error("a snapshot needs at least one slice")]
    Empty,
}

/// Analyses validated slices.
///
/// # Errors
/// [`AnalysisError`] for duplicate expiries or a smile that cannot be fitted.
pub fn analyze(slices: &[Slice], options: &AnalyzeOptions) -> Result<Analysis, AnalysisError> {
    let order = expiry_order(slices)?;
    let inputs: Vec<(&[SmileQuote], f64)> = order.iter().map(|&i| (slices[i].quotes(), slices[i].tau())).collect();
    let smiles = fit_smiles(&inputs, options.smile)
        .map_err(|(position, source)| AnalysisError::Smile { index: order[position], source })?;
    let mut out: Vec<SliceAnalysis> =
        order.iter().zip(smiles).map(|(&index, smile)| analyze_expiry(index, &slices[index], smile)).collect();
    check_calendar(&mut out);

    let fit = options.fit.as_ref().map(|spec| fit_leverage(&leverage_target(slices, &out), spec));
    Ok(Analysis { slices: out, fit })
}

/// The slices' indices in order of expiry; two slices at one expiry are an error.
fn expiry_order(slices: &[Slice]) -> Result<Vec<usize>, AnalysisError> {
    if slices.is_empty() {
        return Err(AnalysisError::Empty);
    }
    let mut order: Vec<usize> = (0..slices.len()).collect();
    order.sort_by(|&a, &b| slices[a].tau().total_cmp(&slices[b].tau()));
    for pair in order.windows(2) {
        if (slices[pair[0]].tau() - slices[pair[1]].tau()).abs() < 1e-12 {
            let (first, second) = (pair[0].min(pair[1]), pair[0].max(pair[1]));
            return Err(AnalysisError::DuplicateExpiry { first, second });
        }
    }
    Ok(order)
}

/// One expiry from its fitted smile: the swap levels by replication, their standard
/// errors, the flagged quotes and the warnings (forward variance and the calendar check
/// come later, across expiries).
fn analyze_expiry(index: usize, slice: &Slice, smile: FittedSmile) -> SliceAnalysis {
    let tau = slice.tau();
    let replication = replicate(&smile.curve, smile.quoted_range, tau);
    let level_errors = level_errors(&smile, tau);
    let fitted_vols = fitted_vols(slice, &smile);
    let flagged_quotes = flagged_quotes(slice, &smile, &fitted_vols);
    let butterfly = smile.butterfly_over_quotes();
    let warnings = expiry_warnings(slice, &smile, &replication, level_errors.as_ref(), &flagged_quotes, butterfly);
    SliceAnalysis {
        input_index: index,
        tau,
        forward: slice.forward(),
        discount: slice.discount(),
        points: slice.quotes().len(),
        fitted_vols,
        delta_levels: delta_levels(&smile.curve, tau),
        flagged_quotes,
        smile,
        replication,
        level_errors,
        forward_variance: f64::NAN,
        butterfly,
        calendar_ok: true,
        warnings,
    }
}

/// The fitted smile's implied vol at each quote's log-moneyness: `sqrt(w(k) / tau)`,
/// a negative total variance read as zero.
fn fitted_vols(slice: &Slice, smile: &FittedSmile) -> Vec<f64> {
    let tau = slice.tau();
    slice.quotes().iter().map(|q| (smile.curve.total_variance(q.k).max(0.0) / tau).sqrt()).collect()
}

/// The quotes the smile fit left out or found suspect, in quote order.
fn flagged_quotes(slice: &Slice, smile: &FittedSmile, fitted_vols: &[f64]) -> Vec<FlaggedQuote> {
    let quotes = slice.quotes();
    let flag = |index: usize, reason: FlagReason| {
        let q = quotes[index];
        FlaggedQuote {
            index,
            strike: slice.strikes()[index],
            vol: q.vol,
            fitted_vol: fitted_vols[index],
            half_spread: q.half_spread,
            reason,
        }
    };
    let mut flagged_quotes: Vec<FlaggedQuote> = smile
        .excluded
        .iter()
        .map(|(i, _)| flag(*i, FlagReason::LeftOut))
        .chain(smile.suspect.iter().map(|i| flag(*i, FlagReason::Suspect)))
        .collect();
    flagged_quotes.sort_by_key(|f| f.index);
    flagged_quotes
}

/// The human warnings of one expiry, in a fixed order: the slice's notes, an uncertain
/// level, the smile fit's notes, quotes left out, suspect quotes, butterfly arbitrage,
/// wide wings, replication short of its target.
fn expiry_warnings(
    slice: &Slice,
    smile: &FittedSmile,
    replication: &Replication,
    level_errors: Option<&LevelErrors>,
    flagged_quotes: &[FlaggedQuote],
    butterfly: Option<ButterflyViolation>,
) -> Vec<String> {
    let mut warnings: Vec<String> = slice.notes().to_vec();
    if let Some(errors) = level_errors {
        let variance = replication.levels.variance;
        let vol_se = errors.total()[0] / (2.0 * variance.max(1e-12).sqrt());
        if 2.0 * vol_se > UNCERTAIN_VOL_POINTS / 100.0 {
            warnings.push(format!(
                "uncertain level: the variance swap is known to within {:.1} vol points (two standard errors) from these quotes",
                2.0 * vol_se * 100.0
            ));
        }
    }
    warnings.extend(smile.notes.iter().cloned());
    for (i, distance) in &smile.excluded {
        // `distance` is fitted smile minus quote: negative when the quote is above.
        let side = if *distance < 0.0 { "above" } else { "below" };
        warnings.push(format!(
            "quote at strike {} is {:.1} vol points {side} the fitted smile: left out as off-market",
            slice.strikes()[*i],
            distance.abs() * 100.0
        ));
    }
    for f in flagged_quotes.iter().filter(|f| f.reason == FlagReason::Suspect) {
        warnings.push(format!(
            "quote at strike {} is {:.1} vol points from the fitted smile, more than {} half spreads: suspect",
            f.strike,
            (f.fitted_vol - f.vol).abs() * 100.0,
            crate::analytics::smile::SUSPECT_HALF_SPREADS
        ));
    }
    if let Some(b) = butterfly {
        warnings.push(format!(
            "butterfly arbitrage: Durrleman's g < 0 for log-moneyness in [{:.3}, {:.3}], minimum {:.3e} at {:.3}",
            b.k_from, b.k_to, b.g_min, b.k_at_min
        ));
    }
    if replication.wing_share > WIDE_WING_SHARE {
        warnings.push(format!(
            "wide wings: {:.1}% of the variance swap comes from beyond the quoted strikes",
            100.0 * replication.wing_share
        ));
    }
    if !replication.converged {
        warnings.push(format!(
            "replication did not reach its accuracy target (wings integrated to log-moneyness {:.1}..{:.1})",
            replication.limits.0, replication.limits.1
        ));
    }
    warnings
}

/// Smallest leverage swap uncertainty the fit uses, as a share of the median over
/// expiries: weights then differ by at most a factor of 25 (rule of thumb, no source).
pub const LEVERAGE_SE_FLOOR_SHARE: f64 = 0.2;

/// The swap levels the model is fitted to, from an analysis of `slices`: per expiry
/// the variance and leverage swaps, weighted by their standard errors (or by the
/// quotes' bid/ask spreads; no weights when neither is known for every slice). The fit of
/// [`analyze`] uses it, and so do the benchmarks, so that they time that same fit.
pub fn leverage_target(slices: &[Slice], out: &[SliceAnalysis]) -> LeverageTarget {
    LeverageTarget {
        taus: out.iter().map(|s| s.tau).collect(),
        variance_swap: out.iter().map(|s| s.replication.levels.variance).collect(),
        leverage_swap: out.iter().map(|s| s.replication.levels.leverage).collect(),
        uncertainty: leverage_uncertainty(slices, out),
    }
}

/// Forward variance per period and the calendar checks: total variance at fixed
/// log-moneyness and `tau * VS` must not fall with `tau` (MATH.md sections 3-4).
fn check_calendar(out: &mut [SliceAnalysis]) {
    let taus: Vec<f64> = out.iter().map(|s| s.tau).collect();
    let vs: Vec<f64> = out.iter().map(|s| s.replication.levels.variance).collect();
    let gs: Vec<f64> = out.iter().map(|s| s.replication.levels.gamma).collect();
    if let Ok(term) = TermStructure::new(&taus, &vs, &gs) {
        for (s, xi) in out.iter_mut().zip(term.forward_variances()) {
            s.forward_variance = xi;
            if xi < 0.0 {
                s.calendar_ok = false;
                s.warnings
                    .push(format!("calendar arbitrage: negative forward variance {xi:.3e} ending at this expiry"));
            }
        }
    }
    for j in 1..out.len() {
        let (prev, cur) = (&out[j - 1], &out[j]);
        let lo = prev.smile.quoted_range.0.max(cur.smile.quoted_range.0);
        let hi = prev.smile.quoted_range.1.min(cur.smile.quoted_range.1);
        if !(hi > lo) {
            continue;
        }
        let mut worst: Option<(f64, f64)> = None;
        for i in 0..=40 {
            let k = lo + (hi - lo) * i as f64 / 40.0;
            let drop = prev.smile.curve.total_variance(k) - cur.smile.curve.total_variance(k);
            if drop > CALENDAR_TOTAL_VARIANCE_TOL && worst.is_none_or(|w| drop > w.1) {
                worst = Some((k, drop));
            }
        }
        if let Some((k, drop)) = worst {
            let prev_tau = prev.tau;
            let s = &mut out[j];
            s.calendar_ok = false;
            s.warnings.push(format!(
                "calendar arbitrage: total variance at log-moneyness {k:.3} is {drop:.3e} below the expiry at tau {prev_tau:.4}"
            ));
        }
    }
}

/// One-standard-deviation uncertainty of each leverage swap level: its standard error
/// ([`super::uncertainty`]) when every slice has one, held to at least
/// [`LEVERAGE_SE_FLOOR_SHARE`] of their median (a clean expiry's se can be nearly nil,
/// and one such expiry must not carry the whole fit); otherwise from the quotes'
/// bid/ask spreads, when every slice has some: a vol shift of the median half
/// spread moves the variance swap by about `2 sqrt(VS) h`; the leverage swap is
/// given the same uncertainty scaled by `sqrt(3 / n)` for `n` independent quotes
/// (a rule of thumb, common practice, no source: it only sets relative weights).
fn leverage_uncertainty(slices: &[Slice], out: &[SliceAnalysis]) -> Option<Vec<f64>> {
    let se: Option<Vec<f64>> =
        out.iter().map(|s| s.level_errors.map(|e| e.total()[2]).filter(|x| x.is_finite() && *x > 0.0)).collect();
    if let Some(se) = se {
        let floor = LEVERAGE_SE_FLOOR_SHARE * super::numerics::stats::median(&se)?;
        return Some(se.iter().map(|x| x.max(floor)).collect());
    }
    out.iter()
        .map(|s| {
            let spreads = || slices[s.input_index].quotes().iter().filter_map(|q| q.half_spread).filter(|h| *h > 0.0);
            let h = super::numerics::stats::median_of(spreads())?;
            let vs = s.replication.levels.variance.max(1e-12);
            Some(2.0 * vs.sqrt() * h * (3.0 / spreads().count() as f64).sqrt())
        })
        .collect()
}
