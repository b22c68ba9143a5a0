//! Output documents: the analysis of a snapshot and the fit of swap levels.

use super::input::{ValidSnapshot, ValidSwaps};
use crate::analytics::analysis::{Analysis, SliceAnalysis};
use crate::analytics::calibrate::{DownWeightReason, FitOutcome, FitStatus, ModelKind};
use crate::analytics::smile::SmileCurve;
use crate::analytics::tenors::ExpiryLevels;
use serde::Serialize;

/// The analysis of a snapshot (or, from `logstrip fit`, of swap levels).
#[derive(Debug, Clone, Serialize, utoipa::ToSchema)]
#[schema(example = json!({
    "underlying": "KESTREL50", "as_of": "2026-11-30T15:30:00Z", "spot": 4210.5, "smile": "svi",
    "curve": [{"tau": 0.0493, "expiry": "2026-12-18T21:00:00Z", "forward": 4215.2, "discount": 0.9975,
               "variance_swap": 0.0406, "variance_swap_vol": 0.2015, "gamma_swap": 0.0399,
               "gamma_swap_vol": 0.1998, "leverage_swap": -0.0007, "forward_variance": 0.0406,
               "quality": {"points": 60, "excluded_points": 0, "wing_share": 0.002, "smile_rmse_vol": 0.0004,
                           "integration_error": 1e-15, "butterfly_ok": true, "calendar_ok": true, "warnings": []},
               "smile": {"method": "svi", "a": 0.0011, "b": 0.0152, "rho": -0.62, "m": 0.012, "sigma": 0.045}}],
    "fit": {"model": "rough_heston", "params": {"hurst": 0.08, "rho_nu": -0.45, "mean_reversion": 0.4},
            "fixed": [], "status": "converged", "iterations": 12, "evaluations": 15, "leverage_rmse": 1.2e-7,
            "model_leverage_swap": [-0.00065], "active_bounds": [], "elapsed_us": 240},
    "tenors": [{"tenor": "1M", "tau": 0.0833, "basis": "interpolated", "variance_swap_vol": 0.2016,
                "atm_vol": 0.1893, "skew_25_delta": 0.0581, "forward_vol": 0.2016,
                "gamma_minus_variance_vol": -0.0017, "leverage_swap": -0.0007,
                "variance_swap": 0.04064, "forward_variance": 0.04064},
               {"tenor": "2Y", "tau": 2.0, "basis": "omitted",
                "omitted_reason": "beyond the last expiry (0.0493 years): not extrapolated"}]
}))]
pub struct AnalysisDoc {
    /// Underlying name, as given.
    pub underlying: String,
    /// Valuation time, RFC 3339 UTC.
    pub as_of: String,
    /// Spot, when given.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub spot: Option<f64>,
    /// Smile method used (`svi` or `monotone`); absent for `logstrip fit`.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub smile: Option<&'static str>,
    /// One entry per expiry, sorted by `tau`.
    pub curve: Vec<CurveDoc>,
    /// The model fit, unless the model was `none`.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub fit: Option<FitResultDoc>,
    /// The standard tenors 1M, 3M, 6M, 1Y and 2Y, in that order, from `curve`: total
    /// variance linear in `tau` between expiries (flat forward variance), never
    /// extrapolated beyond the last expiry (see docs/output.md).
    pub tenors: Vec<super::tenors::TenorDoc>,
}

/// Swap levels at one expiry (annualised variance; vols are their square roots).
#[derive(Debug, Clone, Serialize, utoipa::ToSchema)]
pub struct CurveDoc {
    /// Time to expiry, years.
    pub tau: f64,
    /// Expiry as given, when given as a date.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub expiry: Option<String>,
    /// Forward.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub forward: Option<f64>,
    /// Discount factor.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub discount: Option<f64>,
    /// Variance swap fair strike.
    pub variance_swap: f64,
    /// `sqrt(variance_swap)`.
    pub variance_swap_vol: Option<f64>,
    /// Gamma swap fair strike.
    pub gamma_swap: f64,
    /// `sqrt(gamma_swap)`.
    pub gamma_swap_vol: Option<f64>,
    /// `gamma_swap - variance_swap`.
    pub leverage_swap: f64,
    /// Implied vol at the forward (decimal), from the fitted smile.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub atm_vol: Option<f64>,
    /// 25-delta put vol minus 25-delta call vol (decimal; positive for the usual
    /// equity smile), from the fitted smile. Deltas are forward Black deltas,
    /// undiscounted and without premium adjustment: call `N(d1)`, put `N(d1) - 1`.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub skew_25_delta: Option<f64>,
    /// Standard error of `variance_swap` (annualised variance): the quotes' estimated
    /// noise carried through the smile fit, the wings and the integral, and the spread
    /// of the level over reasonable wing rules (at least 1% of the level's part from
    /// beyond the quotes), in quadrature. Absent where the smile
    /// method gives none (`monotone`) or for levels given rather than replicated.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub variance_swap_se: Option<f64>,
    /// Standard error of `gamma_swap`, as `variance_swap_se`.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub gamma_swap_se: Option<f64>,
    /// Standard error of `leverage_swap`, as `variance_swap_se`.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub leverage_swap_se: Option<f64>,
    /// Forward variance on the period ending at this expiry.
    pub forward_variance: f64,
    /// Data quality of the slice.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub quality: Option<QualityDoc>,
    /// The fitted smile.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub smile: Option<SmileDoc>,
    /// The fitted smile at each quote.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub quote_fit: Option<QuoteFitDoc>,
}

/// The fitted smile read at each usable quote's strike: two arrays aligned with the
/// slice's quotes in strike order (the input's quotes, less any a price input could
/// not use, which its warnings name), `quality.points` long. Decimal vols rounded to
/// [`QUOTE_FIT_DECIMALS`] decimals (a thousandth of a vol point), far below any
/// bid/ask spread, to keep the stored analysis small (the 35 x 60 demo snapshot's
/// analysis grows by 36,643 bytes, from 38,180).
#[derive(Debug, Clone, Serialize, utoipa::ToSchema)]
pub struct QuoteFitDoc {
    /// The fitted smile's implied vol at the quote's strike, decimal.
    pub fitted_vol: Vec<f64>,
    /// Quoted vol minus `fitted_vol`, decimal (positive when the quote is above the smile).
    pub residual: Vec<f64>,
}

/// Decimals kept in [`QuoteFitDoc`] and `median_half_spread`: 1e-5 in vol, a
/// thousandth of a vol point.
pub const QUOTE_FIT_DECIMALS: i32 = 5;

/// `x` rounded to [`QUOTE_FIT_DECIMALS`] decimals.
pub fn rounded_vol(x: f64) -> f64 {
    let scale = 10f64.powi(QUOTE_FIT_DECIMALS);
    (x * scale).round() / scale
}

/// The fitted vols and residuals of one expiry's quotes.
fn quote_fit_doc(slice: &crate::analytics::slice::Slice, s: &SliceAnalysis) -> QuoteFitDoc {
    QuoteFitDoc {
        fitted_vol: s.fitted_vols.iter().map(|v| rounded_vol(*v)).collect(),
        residual: slice.quotes().iter().zip(&s.fitted_vols).map(|(q, v)| rounded_vol(q.vol - v)).collect(),
    }
}

/// Data quality of a slice.
#[derive(Debug, Clone, Serialize, utoipa::ToSchema)]
pub struct QualityDoc {
    /// Usable quotes.
    pub points: usize,
    /// Quotes left out of the smile fit as off-market.
    pub excluded_points: usize,
    /// Share of the variance swap from beyond the quoted strikes.
    pub wing_share: f64,
    /// RMS vol distance between smile and quotes used.
    pub smile_rmse_vol: f64,
    /// Estimated absolute integration error of the variance swap level.
    pub integration_error: f64,
    /// No butterfly arbitrage found.
    pub butterfly_ok: bool,
    /// No calendar arbitrage against the previous expiry.
    pub calendar_ok: bool,
    /// What is suspect, in words.
    pub warnings: Vec<String>,
    /// Quotes the smile fit left out or finds suspect, by strike.
    pub flagged_quotes: Vec<FlaggedQuoteDoc>,
    /// Median half bid/ask spread of the quotes, decimal vol: the yardstick for
    /// `smile_rmse_vol`. Absent without bid/ask.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub median_half_spread: Option<f64>,
}

/// A quote named by the smile fit.
#[derive(Debug, Clone, Serialize, utoipa::ToSchema)]
pub struct FlaggedQuoteDoc {
    /// Strike.
    pub strike: f64,
    /// Quoted implied vol, decimal.
    pub vol: f64,
    /// The fitted smile's vol at the strike, decimal.
    pub fitted_vol: f64,
    /// Distance from the fit in half spreads, when bid/ask was quoted.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub half_spreads: Option<f64>,
    /// `left_out` (off-market: not used by the fit) or `suspect` (used, but further
    /// from the fit than two half spreads).
    pub reason: FlagReasonDoc,
}

/// Why a quote is named.
#[derive(Debug, Clone, Copy, Serialize, utoipa::ToSchema)]
#[serde(rename_all = "snake_case")]
pub enum FlagReasonDoc {
    /// Left out of the fit.
    LeftOut,
    /// Kept, but outside two half spreads of the fit.
    Suspect,
}

/// The fitted smile of a slice.
#[derive(Debug, Clone, Serialize, utoipa::ToSchema)]
#[serde(tag = "method", rename_all = "snake_case")]
pub enum SmileDoc {
    /// Raw SVI parameters.
    Svi {
        /// Level.
        a: f64,
        /// Wing steepness.
        b: f64,
        /// Asymmetry.
        rho: f64,
        /// Shift.
        m: f64,
        /// Curvature scale.
        sigma: f64,
    },
    /// SVI plus a smoothing spline of its residuals, square-root wings.
    SviSpline {
        /// Level of the SVI base.
        a: f64,
        /// Wing steepness of the SVI base.
        b: f64,
        /// Asymmetry of the SVI base.
        rho: f64,
        /// Shift of the SVI base.
        m: f64,
        /// Curvature scale of the SVI base.
        sigma: f64,
        /// Log-moneyness where the wings begin (the outermost kept quotes).
        wing_edges: [f64; 2],
        /// Asymptotic wing slopes of total variance: left (magnitude), right.
        wing_slopes: [f64; 2],
    },
    /// Monotone cubic through the quotes.
    Monotone {
        /// Number of nodes.
        nodes: usize,
        /// Left wing slope (magnitude) and right wing slope of total variance.
        wing_slopes: [f64; 2],
    },
}

/// The model fit.
#[derive(Debug, Clone, Serialize, utoipa::ToSchema)]
pub struct FitResultDoc {
    /// `rough_heston` or `heston`.
    pub model: &'static str,
    /// Parameters.
    pub params: ParamsDoc,
    /// Names of parameters held fixed.
    pub fixed: Vec<&'static str>,
    /// `converged`, `at_bound` (converged with parameters on their bounds, named in
    /// `active_bounds` and `message`), `max_iterations`, `budget_exhausted` (the
    /// evaluation or time budget ran out: the best point reached) or `failed`.
    pub status: &'static str,
    /// Why, when not converged, or which fallback was used.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub message: Option<String>,
    /// Solver iterations.
    pub iterations: u64,
    /// Model evaluations.
    pub evaluations: u64,
    /// RMS distance between model and market leverage swaps (annualised variance).
    pub leverage_rmse: Option<f64>,
    /// Model leverage swap per expiry.
    pub model_leverage_swap: Vec<f64>,
    /// Parameters that ended at a bound.
    pub active_bounds: Vec<&'static str>,
    /// The model the fit ended in: `heston` when a rough Heston fit's Hurst exponent
    /// reached 1/2, else `model`.
    pub selected_model: &'static str,
    /// Expiries that count for much less than a typical one: down-weighted by the
    /// robust (Huber) loss, or by a large standard error; empty when none does.
    pub down_weighted_expiries: Vec<DownWeightedDoc>,
    /// Wall time of the fit, microseconds.
    pub elapsed_us: u64,
    /// Vol-of-vol as supplied.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub nu: Option<f64>,
    /// `rho_nu / nu`.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub rho: Option<f64>,
    /// Volatility-swap convexity per expiry (with `nu`).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub convexity: Option<Vec<ConvexityDoc>>,
}

/// An expiry the fit down-weighted.
#[derive(Debug, Clone, Serialize, utoipa::ToSchema)]
pub struct DownWeightedDoc {
    /// Expiry, years.
    pub tau: f64,
    /// Its weight in the fit's loss relative to an expiry of median standard error
    /// that fits (at most 1).
    pub weight: f64,
    /// `robust_loss` (it missed the model by more than the robust loss's cut, for a
    /// weight below one half) or
    /// `large_standard_error` (its standard error is above 10 times the median).
    pub reason: &'static str,
}

/// Fitted parameters.
#[derive(Debug, Clone, Serialize, utoipa::ToSchema)]
pub struct ParamsDoc {
    /// Hurst exponent (rough Heston only).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub hurst: Option<f64>,
    /// `rho * nu`.
    pub rho_nu: Option<f64>,
    /// Mean reversion.
    pub mean_reversion: Option<f64>,
}

/// Convexity at one expiry.
#[derive(Debug, Clone, Serialize, utoipa::ToSchema)]
pub struct ConvexityDoc {
    /// Expiry, years.
    pub tau: f64,
    /// Standard deviation of annualised realized variance.
    pub realized_variance_stdev: f64,
    /// Volatility swap fair strike (annualised vol).
    pub volatility_swap: f64,
    /// `variance_swap_vol - volatility_swap`.
    pub convexity_adjustment: f64,
}

fn finite(x: f64) -> Option<f64> {
    x.is_finite().then_some(x)
}

fn vol_of(level: f64) -> Option<f64> {
    (level >= 0.0).then(|| level.sqrt())
}

fn model_name(model: ModelKind) -> &'static str {
    match model {
        ModelKind::RoughHeston => "rough_heston",
        ModelKind::Heston => "heston",
    }
}

/// The output form of a fit.
pub fn fit_doc(fit: &FitOutcome, nu: Option<f64>) -> FitResultDoc {
    FitResultDoc {
        model: model_name(fit.model),
        params: ParamsDoc {
            hurst: match fit.model {
                ModelKind::RoughHeston => finite(fit.params.hurst),
                ModelKind::Heston => None,
            },
            rho_nu: finite(fit.params.rho_nu),
            mean_reversion: finite(fit.params.mean_reversion),
        },
        fixed: fit.fixed.iter().map(|p| p.as_str()).collect(),
        status: match fit.status {
            FitStatus::Converged => "converged",
            FitStatus::AtBound => "at_bound",
            FitStatus::MaxIterations => "max_iterations",
            FitStatus::BudgetExhausted => "budget_exhausted",
            FitStatus::Failed => "failed",
        },
        message: fit.message.clone(),
        iterations: fit.iterations,
        evaluations: fit.evaluations,
        leverage_rmse: finite(fit.leverage_rmse),
        model_leverage_swap: fit.model_leverage_swap.clone(),
        active_bounds: fit.active_bounds.iter().map(|p| p.as_str()).collect(),
        selected_model: model_name(fit.selected_model),
        down_weighted_expiries: fit
            .down_weighted
            .iter()
            .map(|d| DownWeightedDoc {
                tau: d.tau,
                weight: d.weight,
                reason: match d.reason {
                    DownWeightReason::RobustLoss => "robust_loss",
                    DownWeightReason::LargeStandardError => "large_standard_error",
                },
            })
            .collect(),
        elapsed_us: fit.elapsed_us,
        nu: fit.convexity.as_ref().and(nu),
        rho: fit.rho,
        convexity: fit.convexity.as_ref().map(|points| {
            points
                .iter()
                .map(|c| ConvexityDoc {
                    tau: c.tau,
                    realized_variance_stdev: c.realized_variance_stdev,
                    volatility_swap: c.volatility_swap,
                    convexity_adjustment: c.convexity_adjustment,
                })
                .collect()
        }),
    }
}

/// The output of `logstrip analyze`.
pub fn analysis_doc(input: &ValidSnapshot, analysis: &Analysis) -> AnalysisDoc {
    let curve: Vec<CurveDoc> = analysis.slices.iter().map(|s| curve_point(input, s)).collect();
    let nu = input.options.fit.as_ref().and_then(|f| f.nu);
    AnalysisDoc {
        tenors: tenors_of(&curve),
        underlying: input.underlying.clone(),
        as_of: input.as_of.to_rfc3339_opts(chrono::SecondsFormat::Secs, true),
        spot: input.spot,
        smile: Some(match input.options.smile {
            crate::analytics::smile::SmileMethod::SviSpline => "svi_spline",
            crate::analytics::smile::SmileMethod::Svi => "svi",
            crate::analytics::smile::SmileMethod::Monotone => "monotone",
        }),
        curve,
        fit: analysis.fit.as_ref().map(|f| fit_doc(f, nu)),
    }
}

/// The standard tenors of a curve (sorted by `tau`).
fn tenors_of(curve: &[CurveDoc]) -> Vec<super::tenors::TenorDoc> {
    let expiries: Vec<ExpiryLevels> = curve
        .iter()
        .map(|c| ExpiryLevels {
            tau: c.tau,
            variance_swap: c.variance_swap,
            gamma_swap: c.gamma_swap,
            atm_vol: c.atm_vol,
            skew_25_delta: c.skew_25_delta,
        })
        .collect();
    super::tenors::tenor_docs(&expiries)
}

/// One expiry of an analysis: its swap levels with their standard errors, forward
/// variance, quality and smile.
fn curve_point(input: &ValidSnapshot, s: &SliceAnalysis) -> CurveDoc {
    let l = s.replication.levels;
    let slice = &input.slices[s.input_index];
    CurveDoc {
        tau: s.tau,
        expiry: input.expiries.get(s.input_index).cloned().flatten(),
        forward: Some(s.forward),
        discount: Some(s.discount),
        variance_swap: l.variance,
        variance_swap_vol: vol_of(l.variance),
        gamma_swap: l.gamma,
        gamma_swap_vol: vol_of(l.gamma),
        leverage_swap: l.leverage,
        atm_vol: s.delta_levels.map(|d| d.atm_vol),
        skew_25_delta: s.delta_levels.map(|d| d.skew_25_delta),
        variance_swap_se: s.level_errors.map(|e| e.total()[0]),
        gamma_swap_se: s.level_errors.map(|e| e.total()[1]),
        leverage_swap_se: s.level_errors.map(|e| e.total()[2]),
        forward_variance: s.forward_variance,
        quality: Some(quality_doc(slice, s)),
        smile: Some(smile_doc(&s.smile.curve)),
        quote_fit: Some(quote_fit_doc(slice, s)),
    }
}

/// How far one expiry's levels can be trusted.
fn quality_doc(slice: &crate::analytics::slice::Slice, s: &SliceAnalysis) -> QualityDoc {
    let half_spreads = slice.quotes().iter().filter_map(|q| q.half_spread);
    QualityDoc {
        median_half_spread: crate::analytics::numerics::stats::median_of(half_spreads).map(rounded_vol),
        points: s.points,
        excluded_points: s.smile.excluded.len(),
        wing_share: s.replication.wing_share,
        smile_rmse_vol: s.smile.rmse_vol,
        integration_error: s.replication.error.variance,
        butterfly_ok: s.butterfly.is_none(),
        calendar_ok: s.calendar_ok,
        warnings: s.warnings.clone(),
        flagged_quotes: s
            .flagged_quotes
            .iter()
            .map(|f| FlaggedQuoteDoc {
                strike: f.strike,
                vol: f.vol,
                fitted_vol: f.fitted_vol,
                half_spreads: f.half_spread.filter(|h| *h > 0.0).map(|h| (f.vol - f.fitted_vol).abs() / h),
                reason: match f.reason {
                    crate::analytics::analysis::FlagReason::LeftOut => FlagReasonDoc::LeftOut,
                    crate::analytics::analysis::FlagReason::Suspect => FlagReasonDoc::Suspect,
                },
            })
            .collect(),
    }
}

/// The fitted smile's parameters.
fn smile_doc(curve: &SmileCurve) -> SmileDoc {
    match curve {
        SmileCurve::Svi(p) => SmileDoc::Svi { a: p.a, b: p.b, rho: p.rho, m: p.m, sigma: p.sigma },
        SmileCurve::SviSpline(c) => {
            let p = c.svi;
            let (l, r) = c.wing_slopes();
            let edges = c.edges();
            SmileDoc::SviSpline {
                a: p.a,
                b: p.b,
                rho: p.rho,
                m: p.m,
                sigma: p.sigma,
                wing_edges: [edges[0], edges[1]],
                wing_slopes: [l, r],
            }
        }
        SmileCurve::Monotone(m) => {
            let (l, r) = m.wing_slopes();
            SmileDoc::Monotone { nodes: m.nodes().len(), wing_slopes: [l, r] }
        }
    }
}

/// The output of `logstrip fit`: the swaps as given, with forward variance, and the fit.
pub fn swaps_doc(input: &ValidSwaps, fit: Option<&FitOutcome>) -> AnalysisDoc {
    let t = &input.target;
    let xi = crate::analytics::calibrate::forward_variances(&t.taus, &t.variance_swap).unwrap_or_default();
    let curve: Vec<CurveDoc> = (0..t.taus.len())
        .map(|i| CurveDoc {
            tau: t.taus[i],
            expiry: input.expiries[i].clone(),
            forward: None,
            discount: None,
            variance_swap: t.variance_swap[i],
            variance_swap_vol: vol_of(t.variance_swap[i]),
            gamma_swap: input.gamma_swap[i],
            gamma_swap_vol: vol_of(input.gamma_swap[i]),
            leverage_swap: t.leverage_swap[i],
            atm_vol: None,
            skew_25_delta: None,
            variance_swap_se: None,
            gamma_swap_se: None,
            leverage_swap_se: None,
            forward_variance: xi.get(i).cloned().unwrap_or(f64::NAN),
            quality: None,
            smile: None,
            quote_fit: None,
        })
        .collect();
    let nu = input.fit.as_ref().and_then(|f| f.nu);
    AnalysisDoc {
        tenors: tenors_of(&curve),
        underlying: input.underlying.clone(),
        as_of: input.as_of.to_rfc3339_opts(chrono::SecondsFormat::Secs, true),
        spot: input.spot,
        smile: None,
        curve,
        fit: fit.map(|f| fit_doc(f, nu)),
    }
}
