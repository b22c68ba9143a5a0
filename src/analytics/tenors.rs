//! Levels at the standard tenors (1M, 3M, 6M, 1Y, 2Y) read off the expiries of one
//! analysis, so that snapshots with different listed expiries compare tenor by tenor.
//!
//! Time: a tenor is a fixed time to expiry in the analysis' own ACT/365F years
//! (`tau`): 1M = 1/12, 3M = 1/4, 6M = 1/2, 1Y = 1, 2Y = 2 (1M is 30.4 days, not a
//! calendar month).
//!
//! Rules (MATH.md section 4: total variance linear in `tau`, flat forward variance):
//! - Variance and gamma swaps: total variance `tau * VS` (and `tau * GS`) linear in
//!   `tau` between the bracketing expiries, as [`super::term::TermStructure`] does; the
//!   leverage swap is `GS - VS` at the tenor, so `tau * LS` is linear too.
//! - At-the-money vol: total variance `tau * atm_vol^2` linear in `tau`, the same rule.
//! - 25-delta skew: linear in `tau` with the same weights (the later expiry's weight is
//!   the elapsed share of the period). It keeps a flat skew flat and stays between the
//!   two expiries' skews; between neighbouring listed expiries the skew moves little,
//!   so no shape in `tau` (such as `1/sqrt(tau)`) is imposed (common practice).
//! - Forward vol at a tenor: the square root of the forward variance between the
//!   previous standard tenor given and this one (from time 0 for the first given),
//!   `(w(T_i) - w(T_{i-1})) / (T_i - T_{i-1})` with `w = tau * VS`; absent when that
//!   forward variance is negative (calendar arbitrage), which is reported as it is.
//! - Before the first expiry: total variance runs linearly from zero at `tau = 0`
//!   (flat forward variance), so the variance swap, gamma swap and at-the-money vols
//!   are the first expiry's; the skew is held at the first expiry's. Marked
//!   [`TenorBasis::BeforeFirstExpiry`], and given only up to [`MAX_FRONT_GAP_YEARS`]
//!   before the first expiry; further away the tenor is omitted.
//! - Beyond the last expiry: omitted (no extrapolation), as in `term`.

use super::term::TermStructure;

/// The standard tenors with their names and times (ACT/365F years).
pub const STANDARD_TENORS: [(&str, f64); 5] = [("1M", 1.0 / 12.0), ("3M", 0.25), ("6M", 0.5), ("1Y", 1.0), ("2Y", 2.0)];

/// Furthest a tenor may lie before the first expiry and still be given (years): one
/// month (1/12 year). Up to there flat forward variance from time 0 stands in for an
/// expiry; further, the levels would be a longer expiry's passed off as a short tenor.
pub const MAX_FRONT_GAP_YEARS: f64 = 1.0 / 12.0;

/// One expiry's levels, the input of [`standard_tenors`] (annualised variance, vols
/// as decimals).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ExpiryLevels {
    /// Time to expiry, ACT/365F years.
    pub tau: f64,
    /// Variance swap fair strike.
    pub variance_swap: f64,
    /// Gamma swap fair strike.
    pub gamma_swap: f64,
    /// At-the-money vol, when the smile gave one.
    pub atm_vol: Option<f64>,
    /// 25-delta put vol minus 25-delta call vol, when the smile gave them.
    pub skew_25_delta: Option<f64>,
}

/// How a tenor's levels were found.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TenorBasis {
    /// Between two expiries (or on one).
    Interpolated,
    /// Before the first expiry, within [`MAX_FRONT_GAP_YEARS`]: the first expiry's
    /// levels under flat forward variance from time 0.
    BeforeFirstExpiry,
}

/// Why a tenor has no levels.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum TenorOmission {
    /// The tenor lies beyond the last expiry (years): not extrapolated.
    BeyondLastExpiry {
        /// The last expiry, years.
        last: f64,
    },
    /// The tenor lies more than [`MAX_FRONT_GAP_YEARS`] before the first expiry.
    FarBeforeFirstExpiry {
        /// The first expiry, years.
        first: f64,
    },
    /// The expiries cannot be read as a term structure (not positive, not strictly
    /// increasing, or not finite).
    BadExpiries,
}

/// The levels at one standard tenor (annualised variance; vols as decimals).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TenorLevels {
    /// How they were found.
    pub basis: TenorBasis,
    /// Variance swap fair strike.
    pub variance_swap: f64,
    /// Gamma swap fair strike.
    pub gamma_swap: f64,
    /// `gamma_swap - variance_swap`.
    pub leverage_swap: f64,
    /// At-the-money vol (absent when a bracketing expiry has none).
    pub atm_vol: Option<f64>,
    /// 25-delta skew (absent when a bracketing expiry has none).
    pub skew_25_delta: Option<f64>,
    /// Forward variance from the previous standard tenor given (time 0 for the first)
    /// to this one.
    pub forward_variance: f64,
}

impl TenorLevels {
    /// `sqrt(variance_swap)`; absent when negative.
    pub fn variance_swap_vol(&self) -> Option<f64> {
        vol_of(self.variance_swap)
    }

    /// `sqrt(forward_variance)`; absent when negative (calendar arbitrage).
    pub fn forward_vol(&self) -> Option<f64> {
        vol_of(self.forward_variance)
    }

    /// `sqrt(gamma_swap) - sqrt(variance_swap)`: the leverage swap as a vol spread.
    pub fn gamma_minus_variance_vol(&self) -> Option<f64> {
        Some(vol_of(self.gamma_swap)? - self.variance_swap_vol()?)
    }
}

fn vol_of(variance: f64) -> Option<f64> {
    (variance.is_finite() && variance >= 0.0).then(|| variance.sqrt())
}

/// One standard tenor: its name, time and levels or why it has none.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Tenor {
    /// `1M`, `3M`, `6M`, `1Y` or `2Y`.
    pub name: &'static str,
    /// Time, ACT/365F years.
    pub tau: f64,
    /// The levels, or why the tenor is omitted.
    pub levels: Result<TenorLevels, TenorOmission>,
}

/// The levels at every standard tenor ([`STANDARD_TENORS`], in order) from expiries
/// sorted by `tau`, by the rules of the module documentation.
pub fn standard_tenors(expiries: &[ExpiryLevels]) -> Vec<Tenor> {
    let taus: Vec<f64> = expiries.iter().map(|e| e.tau).collect();
    let vs: Vec<f64> = expiries.iter().map(|e| e.variance_swap).collect();
    let gs: Vec<f64> = expiries.iter().map(|e| e.gamma_swap).collect();
    let term = TermStructure::new(&taus, &vs, &gs).ok();
    let finite_levels = vs.iter().chain(&gs).all(|x| x.is_finite());
    let mut previous = (0.0, 0.0);
    STANDARD_TENORS
        .iter()
        .map(|&(name, tau)| {
            let levels = match &term {
                Some(term) if finite_levels => at_tenor(term, expiries, tau, previous),
                _ => Err(TenorOmission::BadExpiries),
            };
            if let Ok(l) = &levels {
                previous = (tau, tau * l.variance_swap);
            }
            Tenor { name, tau, levels }
        })
        .collect()
}

/// The levels at `tau`, with `previous` the time and total variance of the previous
/// standard tenor (for the forward variance).
fn at_tenor(
    term: &TermStructure,
    expiries: &[ExpiryLevels],
    tau: f64,
    previous: (f64, f64),
) -> Result<TenorLevels, TenorOmission> {
    let (first, last) = (expiries[0].tau, expiries[expiries.len() - 1].tau);
    if tau > last {
        return Err(TenorOmission::BeyondLastExpiry { last });
    }
    if first - tau > MAX_FRONT_GAP_YEARS {
        return Err(TenorOmission::FarBeforeFirstExpiry { first });
    }
    let total_variance = term.total_variance(tau).map_err(|_| TenorOmission::BadExpiries)?;
    let total_gamma = term.total_gamma(tau).map_err(|_| TenorOmission::BadExpiries)?;
    let (basis, atm_vol, skew_25_delta) = if tau < first {
        // Total variance from zero at tau = 0: the vol is the first expiry's.
        (TenorBasis::BeforeFirstExpiry, expiries[0].atm_vol, expiries[0].skew_25_delta)
    } else {
        let (i, j) = bracket(expiries, tau);
        let (a, b) = (&expiries[i], &expiries[j]);
        let weight = if j > i { (tau - a.tau) / (b.tau - a.tau) } else { 0.0 };
        let atm = a.atm_vol.zip(b.atm_vol).and_then(|(va, vb)| {
            let total = a.tau * va * va + weight * (b.tau * vb * vb - a.tau * va * va);
            vol_of(total / tau)
        });
        let skew = a.skew_25_delta.zip(b.skew_25_delta).map(|(sa, sb)| sa + weight * (sb - sa));
        (TenorBasis::Interpolated, atm, skew)
    };
    let variance_swap = total_variance / tau;
    let gamma_swap = total_gamma / tau;
    Ok(TenorLevels {
        basis,
        variance_swap,
        gamma_swap,
        leverage_swap: gamma_swap - variance_swap,
        atm_vol,
        skew_25_delta,
        forward_variance: (total_variance - previous.1) / (tau - previous.0),
    })
}

/// The expiries `(i, j)` around `tau` (within the expiries): `tau` in
/// `[tau_i, tau_j]` with `j = i + 1`, or `i = j` for a single expiry.
fn bracket(expiries: &[ExpiryLevels], tau: f64) -> (usize, usize) {
    let last = expiries.len() - 1;
    let j = expiries.partition_point(|e| e.tau < tau).clamp(1.min(last), last);
    (j.saturating_sub(1), j)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn expiry(tau: f64, vol: f64, gamma_vol: f64, atm: f64, skew: f64) -> ExpiryLevels {
        ExpiryLevels {
            tau,
            variance_swap: vol * vol,
            gamma_swap: gamma_vol * gamma_vol,
            atm_vol: Some(atm),
            skew_25_delta: Some(skew),
        }
    }

    fn levels(t: &Tenor) -> TenorLevels {
        t.levels.unwrap_or_else(|why| panic!("{} omitted: {why:?}", t.name))
    }

    /// Closed form: a flat term structure gives the flat levels exactly at every tenor
    /// inside it, and a forward vol equal to the flat vol. Tolerance: a few roundings.
    #[test]
    fn flat_term_structure_gives_the_flat_levels() {
        let expiries: Vec<ExpiryLevels> =
            [0.05, 0.3, 0.7, 1.5, 2.5].iter().map(|&t| expiry(t, 0.2, 0.19, 0.18, 0.045)).collect();
        let tenors = standard_tenors(&expiries);
        assert_eq!(tenors.iter().map(|t| t.name).collect::<Vec<_>>(), ["1M", "3M", "6M", "1Y", "2Y"]);
        for t in &tenors {
            let l = levels(t);
            assert_eq!(l.basis, TenorBasis::Interpolated);
            for (got, want) in [
                (l.variance_swap_vol(), 0.2),
                (l.forward_vol(), 0.2),
                (l.atm_vol, 0.18),
                (l.skew_25_delta, 0.045),
                (l.gamma_minus_variance_vol(), -0.01),
                (Some(l.leverage_swap), 0.19 * 0.19 - 0.04),
            ] {
                let got = got.expect("present");
                assert!((got - want).abs() < 1e-14, "{}: {got} vs {want}", t.name);
            }
        }
    }

    /// Hand-computed two-expiry case: VS 0.04 at 0.25 y and 0.0625 at 1.25 y, so total
    /// variance 0.01 and 0.078125; at 6M (0.5 y) the weight is 0.25 and the total is
    /// 0.01 + 0.25 * 0.068125 = 0.02703125, VS = 0.0540625. At 1Y the weight is 0.75:
    /// total 0.06109375, VS = 0.06109375. Forward variance 6M -> 1Y is the period's
    /// 0.068125; 3M -> 6M also 0.068125 (both in the second period); 3M from zero is 0.04.
    /// ATM: totals 0.25 * 0.18^2 = 0.0081 and 1.25 * 0.22^2 = 0.0605, at 6M
    /// 0.0081 + 0.25 * 0.0524 = 0.0212, vol sqrt(0.0424); skew 0.06 -> 0.04 gives 0.055.
    #[test]
    fn two_expiries_interpolate_total_variance_linearly() {
        let a = expiry(0.25, 0.2, 0.19, 0.18, 0.06);
        let b = expiry(1.25, 0.25, 0.24, 0.22, 0.04);
        let tenors = standard_tenors(&[a, b]);
        let six = levels(&tenors[2]);
        let year = levels(&tenors[3]);
        let close = |got: f64, want: f64| assert!((got - want).abs() < 1e-14, "{got} vs {want}");
        close(six.variance_swap, 0.0540625);
        close(year.variance_swap, 0.06109375);
        close(year.forward_variance, 0.068125);
        close(six.forward_variance, 0.068125);
        close(six.atm_vol.expect("atm"), 0.0424_f64.sqrt());
        close(six.skew_25_delta.expect("skew"), 0.055);
        // Gamma totals 0.25 * 0.0361 = 0.009025 and 1.25 * 0.0576 = 0.072: at 6M
        // 0.009025 + 0.25 * 0.062975 = 0.02476875, GS = 0.0495375.
        close(six.leverage_swap, 0.0495375 - 0.0540625);
        // 3M sits on the first expiry, its forward variance from time 0; 1M lies two
        // months before it, beyond the one-month limit.
        let three = levels(&tenors[1]);
        close(three.variance_swap, 0.04);
        close(three.forward_variance, 0.04);
        assert_eq!(tenors[0].levels, Err(TenorOmission::FarBeforeFirstExpiry { first: 0.25 }));
        assert_eq!(tenors[4].levels, Err(TenorOmission::BeyondLastExpiry { last: 1.25 }));
    }

    #[test]
    fn far_front_and_bad_input_are_omitted_with_a_reason() {
        let tenors = standard_tenors(&[expiry(0.3, 0.2, 0.19, 0.18, 0.05), expiry(3.0, 0.2, 0.19, 0.18, 0.05)]);
        assert_eq!(tenors[0].levels, Err(TenorOmission::FarBeforeFirstExpiry { first: 0.3 }));
        assert_eq!(levels(&tenors[1]).basis, TenorBasis::BeforeFirstExpiry);
        // 3M is the first tenor given: its forward variance runs from time 0.
        assert!((levels(&tenors[1]).forward_variance - 0.04).abs() < 1e-15);
        for bad in [vec![], vec![expiry(0.5, 0.2, 0.19, 0.18, 0.05), expiry(0.5, 0.2, 0.19, 0.18, 0.05)]] {
            assert!(standard_tenors(&bad).iter().all(|t| t.levels == Err(TenorOmission::BadExpiries)));
        }
        let mut nan = expiry(1.0, 0.2, 0.19, 0.18, 0.05);
        nan.variance_swap = f64::NAN;
        assert!(standard_tenors(&[nan]).iter().all(|t| t.levels.is_err()));
    }

    /// A calendar arbitrage (total variance falling) gives a negative forward variance
    /// and no forward vol, never a bridged value.
    #[test]
    fn negative_forward_variance_has_no_forward_vol() {
        let tenors = standard_tenors(&[expiry(0.25, 0.3, 0.29, 0.3, 0.05), expiry(1.0, 0.1, 0.1, 0.1, 0.05)]);
        let six = levels(&tenors[2]);
        assert!(six.forward_variance < 0.0 && six.forward_vol().is_none());
        assert!(six.variance_swap_vol().is_some());
    }

    /// One expiry: a tenor on it has the expiry's own levels.
    #[test]
    fn a_single_expiry_is_its_own_bracket() {
        let tenors = standard_tenors(&[expiry(0.25, 0.2, 0.19, 0.18, 0.05)]);
        let three = levels(&tenors[1]);
        assert_eq!(three.basis, TenorBasis::Interpolated);
        assert!((three.variance_swap - 0.04).abs() < 1e-15 && (three.atm_vol.expect("atm") - 0.18).abs() < 1e-15);
        assert!(tenors[0].levels.is_err() && tenors[2].levels.is_err());
    }

    #[test]
    fn missing_atm_on_a_bracketing_expiry_leaves_atm_absent() {
        let mut a = expiry(0.25, 0.2, 0.19, 0.18, 0.06);
        a.atm_vol = None;
        let tenors = standard_tenors(&[a, expiry(1.0, 0.2, 0.19, 0.18, 0.06)]);
        let six = levels(&tenors[2]);
        assert!(six.atm_vol.is_none() && six.skew_25_delta.is_some());
    }
}
