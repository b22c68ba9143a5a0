//! A validated option slice: one expiry's forward, discount and smile quotes.
//!
//! Built from implied vols or from call/put prices (vols implied by Black
//! inversion, the forward by put-call parity when not given). Once built, a slice
//! is trusted by the rest of the analytics.

use super::black::implied_total_variance;
use super::smile::SmileQuote;

/// One expiry, validated: `tau > 0`, `forward > 0`, `discount > 0`, at least three
/// quotes with strictly increasing strikes and positive finite vols.
#[derive(Debug, Clone, PartialEq)]
pub struct Slice {
    tau: f64,
    forward: f64,
    discount: f64,
    strikes: Vec<f64>,
    quotes: Vec<SmileQuote>,
    notes: Vec<String>,
}

/// What is wrong with a slice, naming the quote by position when it is one quote.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SliceError {
    /// A scalar field of the slice.
    #[error("{field}: {message}")]
    Field {
        /// `tau`, `forward` or `discount`.
        field: &'static str,
        /// What is wrong.
        message: String,
    },
    /// One quote.
    #[error("quote {index} {field}: {message}")]
    Quote {
        /// Position of the quote in the input.
        index: usize,
        /// `strike`, `vol`, `bid`, `ask`, `call` or `put`.
        field: &'static str,
        /// What is wrong.
        message: String,
    },
    /// Too few usable quotes.
    #[error("needs at least 3 usable quotes, got {0}")]
    TooFewQuotes(usize),
}

/// A quote given as an implied vol.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct VolQuote {
    /// Strike (price units).
    pub strike: f64,
    /// Implied vol (decimal).
    pub vol: f64,
    /// Bid vol, if quoted.
    pub bid: Option<f64>,
    /// Ask vol, if quoted.
    pub ask: Option<f64>,
}

/// A quote given as discounted option prices (mids).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PriceQuote {
    /// Strike (price units).
    pub strike: f64,
    /// Discounted call price, if quoted.
    pub call: Option<f64>,
    /// Discounted put price, if quoted.
    pub put: Option<f64>,
}

fn positive(field: &'static str, v: f64) -> Result<f64, SliceError> {
    if v.is_finite() && v > 0.0 {
        Ok(v)
    } else {
        Err(SliceError::Field { field, message: format!("must be positive, got {v}") })
    }
}

fn check_strikes(strikes: impl Iterator<Item = f64>, errors: &mut Vec<SliceError>) {
    let mut prev: Option<f64> = None;
    for (index, k) in strikes.enumerate() {
        if !(k.is_finite() && k > 0.0) {
            errors.push(SliceError::Quote { index, field: "strike", message: format!("must be positive, got {k}") });
            continue;
        }
        if let Some(p) = prev {
            let order = k.partial_cmp(&p);
            if order == Some(std::cmp::Ordering::Equal) {
                errors.push(SliceError::Quote { index, field: "strike", message: format!("duplicate strike {k}") });
            } else if order == Some(std::cmp::Ordering::Less) {
                errors.push(SliceError::Quote {
                    index,
                    field: "strike",
                    message: format!("strikes must be increasing, {k} follows {p}"),
                });
            }
        }
        prev = Some(k);
    }
}

impl Slice {
    /// A slice from implied vols.
    ///
    /// # Errors
    /// Every problem found, one [`SliceError`] each.
    pub fn from_vols(tau: f64, forward: f64, discount: f64, points: &[VolQuote]) -> Result<Self, Vec<SliceError>> {
        let mut errors = Vec::new();
        for r in [positive("tau", tau), positive("forward", forward), positive("discount", discount)] {
            if let Err(e) = r {
                errors.push(e);
            }
        }
        check_strikes(points.iter().map(|p| p.strike), &mut errors);
        let mut notes = Vec::new();
        for (index, p) in points.iter().enumerate() {
            if !(p.vol.is_finite() && p.vol > 0.0) {
                errors.push(SliceError::Quote {
                    index,
                    field: "vol",
                    message: format!("must be positive, got {}", p.vol),
                });
            }
            for (field, v) in [("vol", Some(p.vol)), ("bid", p.bid), ("ask", p.ask)] {
                match v {
                    Some(v) if v > super::tolerances::PERCENT_VOL_LIMIT => errors.push(SliceError::Quote {
                        index,
                        field,
                        message: format!(
                            "{v} is a vol of {}%: vols are decimals (0.20 for 20%), not percentages",
                            100.0 * v
                        ),
                    }),
                    Some(v) if field != "vol" && !(v.is_finite() && v >= 0.0) => errors.push(SliceError::Quote {
                        index,
                        field,
                        message: format!("must be non-negative, got {v}"),
                    }),
                    _ => {}
                }
            }
            if let (Some(b), Some(a)) = (p.bid, p.ask) {
                if b > a {
                    errors.push(SliceError::Quote {
                        index,
                        field: "bid",
                        message: format!("bid {b} is above ask {a}"),
                    });
                } else if p.vol < b || p.vol > a {
                    notes.push(format!(
                        "quote at strike {}: vol {} lies outside its bid/ask [{b}, {a}]",
                        p.strike, p.vol
                    ));
                }
            }
            if p.vol > super::tolerances::SUSPICIOUS_VOL {
                notes.push(format!(
                    "quote at strike {}: vol {} looks like a percentage, not a decimal",
                    p.strike, p.vol
                ));
            }
        }
        if points.len() < 3 {
            errors.push(SliceError::TooFewQuotes(points.len()));
        }
        if !errors.is_empty() {
            return Err(errors);
        }
        let quotes = points
            .iter()
            .map(|p| SmileQuote {
                k: (p.strike / forward).ln(),
                vol: p.vol,
                half_spread: match (p.bid, p.ask) {
                    (Some(b), Some(a)) => Some(0.5 * (a - b)),
                    _ => None,
                },
            })
            .collect();
        Ok(Self { tau, forward, discount, strikes: points.iter().map(|p| p.strike).collect(), quotes, notes })
    }

    /// A slice from discounted call/put mids. The forward, when not given, comes
    /// from put-call parity `F = K + (C - P)/D` over the strikes nearest where
    /// `C - P` changes sign. Each strike uses its out-of-the-money option (or the
    /// other one through parity); prices outside the no-arbitrage bounds are left
    /// out with a note.
    ///
    /// # Errors
    /// Every problem found, one [`SliceError`] each.
    pub fn from_prices(
        tau: f64,
        forward: Option<f64>,
        discount: f64,
        points: &[PriceQuote],
    ) -> Result<Self, Vec<SliceError>> {
        let mut errors = Vec::new();
        for r in [positive("tau", tau), positive("discount", discount)] {
            if let Err(e) = r {
                errors.push(e);
            }
        }
        if let Some(f) = forward {
            if let Err(e) = positive("forward", f) {
                errors.push(e);
            }
        }
        check_strikes(points.iter().map(|p| p.strike), &mut errors);
        for (index, p) in points.iter().enumerate() {
            if p.call.is_none() && p.put.is_none() {
                errors.push(SliceError::Quote { index, field: "call", message: "give a call or a put price".into() });
            }
            for (field, v) in [("call", p.call), ("put", p.put)] {
                if let Some(v) = v {
                    if !(v.is_finite() && v >= 0.0) {
                        errors.push(SliceError::Quote {
                            index,
                            field,
                            message: format!("must be non-negative, got {v}"),
                        });
                    }
                }
            }
        }
        if !errors.is_empty() {
            return Err(errors);
        }
        let forward = match forward.or_else(|| implied_forward(points, discount)) {
            Some(f) if f.is_finite() && f > 0.0 => f,
            _ => {
                return Err(vec![SliceError::Field {
                    field: "forward",
                    message: "not given and not implied: put-call parity needs a call and a put at the same strikes"
                        .into(),
                }])
            }
        };
        let mut notes = Vec::new();
        let mut strikes = Vec::new();
        let mut quotes = Vec::new();
        for p in points {
            let k = (p.strike / forward).ln();
            // Undiscounted, per unit forward; the missing side through parity.
            let otm = if p.strike < forward {
                p.put.or_else(|| p.call.map(|c| c - discount * (forward - p.strike)))
            } else {
                p.call.or_else(|| p.put.map(|q| q + discount * (forward - p.strike)))
            }
            .map(|v| v / (discount * forward));
            match otm.map(|v| implied_total_variance(k, v)) {
                Some(Ok(w)) => {
                    strikes.push(p.strike);
                    quotes.push(SmileQuote { k, vol: (w / tau).sqrt(), half_spread: None });
                }
                Some(Err(e)) => notes.push(format!("quote at strike {}: {e}; left out", p.strike)),
                None => notes.push(format!("quote at strike {}: no usable price; left out", p.strike)),
            }
        }
        if quotes.len() < 3 {
            return Err(vec![SliceError::TooFewQuotes(quotes.len())]);
        }
        Ok(Self { tau, forward, discount, strikes, quotes, notes })
    }

    /// Time to expiry (years).
    pub fn tau(&self) -> f64 {
        self.tau
    }
    /// Forward (price units).
    pub fn forward(&self) -> f64 {
        self.forward
    }
    /// Discount factor to expiry.
    pub fn discount(&self) -> f64 {
        self.discount
    }
    /// Strikes of the usable quotes.
    pub fn strikes(&self) -> &[f64] {
        &self.strikes
    }
    /// Usable quotes in log-moneyness.
    pub fn quotes(&self) -> &[SmileQuote] {
        &self.quotes
    }
    /// Notes raised while building (quotes left out, quotes outside bid/ask).
    pub fn notes(&self) -> &[String] {
        &self.notes
    }
}

/// Forward implied by put-call parity, `F = K + (C - P)/D`, averaged over up to two
/// strikes each side of where `C - P` changes sign (MATH.md section 1).
pub fn implied_forward(points: &[PriceQuote], discount: f64) -> Option<f64> {
    let pairs: Vec<(f64, f64)> = points
        .iter()
        .filter_map(|p| match (p.call, p.put) {
            (Some(c), Some(q)) if c.is_finite() && q.is_finite() => Some((p.strike, c - q)),
            _ => None,
        })
        .collect();
    if pairs.is_empty() || !(discount > 0.0) {
        return None;
    }
    let switch = pairs.iter().position(|(_, diff)| *diff <= 0.0).unwrap_or(pairs.len());
    let from = switch.saturating_sub(2);
    let to = (switch + 2).min(pairs.len());
    let chosen = &pairs[from..to.max(from + 1).min(pairs.len())];
    let sum: f64 = chosen.iter().map(|(k, diff)| k + diff / discount).sum();
    Some(sum / chosen.len() as f64)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analytics::black::otm_price;

    #[test]
    fn prices_give_back_vols_and_forward() {
        // Identity: Black prices at 25% vol come back as 25% and the forward by parity.
        let (f, d, tau, vol) = (105.0, 0.98, 0.5, 0.25);
        let points: Vec<PriceQuote> = (0..9)
            .map(|i| {
                let strike = 85.0 + 5.0 * i as f64;
                let k = (strike / f).ln();
                let w = vol * vol * tau;
                let otm = otm_price(k, w) * d * f;
                let parity = d * (f - strike);
                let (call, put) = if strike < f { (otm + parity, otm) } else { (otm, otm - parity) };
                PriceQuote { strike, call: Some(call), put: Some(put) }
            })
            .collect();
        let s = Slice::from_prices(tau, None, d, &points).expect("valid");
        assert!((s.forward() - f).abs() < 1e-10, "forward {}", s.forward());
        for q in s.quotes() {
            assert!((q.vol - vol).abs() < 1e-9, "vol {}", q.vol);
        }
    }

    #[test]
    fn every_problem_is_reported() {
        let pts = [
            VolQuote { strike: 100.0, vol: -0.2, bid: None, ask: None },
            VolQuote { strike: 100.0, vol: 0.2, bid: Some(0.3), ask: Some(0.1) },
        ];
        let errs = Slice::from_vols(0.0, 100.0, 1.0, &pts).expect_err("invalid");
        let text: Vec<String> = errs.iter().map(|e| e.to_string()).collect();
        assert!(text.iter().any(|t| t.starts_with("tau")), "{text:?}");
        assert!(text.iter().any(|t| t.contains("quote 0 vol: must be positive")), "{text:?}");
        assert!(text.iter().any(|t| t.contains("duplicate strike")), "{text:?}");
        assert!(text.iter().any(|t| t.contains("above ask")), "{text:?}");
        assert!(text.iter().any(|t| t.contains("at least 3")), "{text:?}");
    }

    #[test]
    fn vols_in_percent_are_refused_naming_the_field() {
        let pts: Vec<VolQuote> = [90.0, 100.0, 110.0]
            .iter()
            .map(|&strike| VolQuote { strike, vol: 20.0, bid: Some(19.5), ask: Some(20.5) })
            .collect();
        let errs = Slice::from_vols(0.5, 100.0, 1.0, &pts).expect_err("percent vols");
        let text: Vec<String> = errs.iter().map(|e| e.to_string()).collect();
        assert_eq!(text.len(), 9, "vol, bid and ask of each quote: {text:?}");
        assert!(text[0].starts_with("quote 0 vol: 20 is a vol of 2000%: vols are decimals"), "{text:?}");
        // 300% is unusual but possible: a note, not an error.
        let high: Vec<VolQuote> =
            [90.0, 100.0, 110.0].iter().map(|&strike| VolQuote { strike, vol: 3.2, bid: None, ask: None }).collect();
        assert!(Slice::from_vols(0.5, 100.0, 1.0, &high).is_ok());
    }
}
