//! Arbitrary numbers at the analysis and the leverage fit, below the parsers: slices
//! from vols or prices (strikes as running sums of gaps, so that sorted strikes are
//! common), either smile method, each model with or without fixed parameters; and
//! the swap-level fit on arbitrary term structures. Values are drawn from plausible
//! ranges, zeros, signed values, NaN, infinities and raw bit patterns, so that both
//! the validation and the numerics behind it are reached. Nothing may panic.
#![no_main]

use libfuzzer_sys::fuzz_target;
use logstrip::analytics::analysis::{analyze, AnalyzeOptions};
use logstrip::analytics::calibrate::{fit_leverage, FitSpec, LeverageTarget, ModelKind};
use logstrip::analytics::slice::{PriceQuote, Slice, VolQuote};
use logstrip::analytics::smile::SmileMethod;

/// Reads numbers from the fuzzer's bytes; past the end it reads zeros.
struct Numbers<'a> {
    bytes: &'a [u8],
}

impl Numbers<'_> {
    fn byte(&mut self) -> u8 {
        match self.bytes.split_first() {
            Some((&b, rest)) => {
                self.bytes = rest;
                b
            }
            None => 0,
        }
    }

    fn unit(&mut self) -> f64 {
        f64::from(u16::from_le_bytes([self.byte(), self.byte()])) / f64::from(u16::MAX)
    }

    /// A number around `typical`: mostly within a factor of a few of it, sometimes
    /// negative, zero, non-finite or any bit pattern.
    fn number(&mut self, typical: f64) -> f64 {
        match self.byte() % 16 {
            0 => f64::from_le_bytes(std::array::from_fn(|_| self.byte())),
            1 => 0.0,
            2 => f64::NAN,
            3 => f64::INFINITY,
            4 => -typical * self.unit(),
            5 => typical * 1e-6 * self.unit(),
            6 => typical * 1e3 * self.unit(),
            _ => typical * (0.05 + 3.0 * self.unit()),
        }
    }

    fn optional(&mut self, typical: f64) -> Option<f64> {
        (self.byte() % 3 != 0).then(|| self.number(typical))
    }
}

fn slice(n: &mut Numbers, prices: bool) -> Option<Slice> {
    let tau = n.number(0.5);
    let forward = n.number(100.0);
    let discount = n.number(0.98);
    let count = 3 + usize::from(n.byte() % 24);
    let mut strike = n.number(60.0);
    if prices {
        let points: Vec<PriceQuote> = (0..count)
            .map(|_| {
                strike += n.number(4.0);
                PriceQuote { strike, call: n.optional(8.0), put: n.optional(8.0) }
            })
            .collect();
        let forward = (n.byte() % 2 == 0).then_some(forward);
        Slice::from_prices(tau, forward, discount, &points).ok()
    } else {
        let points: Vec<VolQuote> = (0..count)
            .map(|_| {
                strike += n.number(4.0);
                let vol = n.number(0.25);
                VolQuote { strike, vol, bid: n.optional(vol * 0.95), ask: n.optional(vol * 1.05) }
            })
            .collect();
        Slice::from_vols(tau, forward, discount, &points).ok()
    }
}

fn fit_spec(n: &mut Numbers) -> FitSpec {
    let flags = n.byte();
    FitSpec {
        model: match flags % 3 {
            0 => None,
            1 => Some(ModelKind::RoughHeston),
            _ => Some(ModelKind::Heston),
        },
        hurst: (flags & 4 != 0).then(|| n.number(0.1)),
        rho_nu: (flags & 8 != 0).then(|| -n.number(0.3)),
        mean_reversion: (flags & 16 != 0).then(|| n.number(0.5)),
        nu: (flags & 32 != 0).then(|| n.number(0.5)),
    }
}

fuzz_target!(|data: &[u8]| {
    let mut n = Numbers { bytes: data };
    let mode = n.byte();
    if mode & 1 == 0 {
        let slice_count = 1 + usize::from(n.byte() % 8);
        let slices: Vec<Slice> = (0..slice_count).filter_map(|_| slice(&mut n, mode & 2 != 0)).collect();
        let options = AnalyzeOptions {
            smile: if mode & 4 != 0 { SmileMethod::Monotone } else { SmileMethod::Svi },
            fit: (mode & 8 != 0).then(|| fit_spec(&mut n)),
        };
        let _ = analyze(&slices, &options);
    } else {
        let count = usize::from(n.byte() % 40);
        let mut tau = 0.0;
        let mut target = LeverageTarget {
            taus: Vec::new(),
            variance_swap: Vec::new(),
            leverage_swap: Vec::new(),
            uncertainty: None,
        };
        for _ in 0..count {
            tau += n.number(0.1);
            target.taus.push(tau);
            target.variance_swap.push(n.number(0.04));
            target.leverage_swap.push(-n.number(0.002));
        }
        if mode & 2 != 0 {
            target.uncertainty = Some((0..count).map(|_| n.number(1e-4)).collect());
        }
        let spec = fit_spec(&mut n);
        let _ = fit_leverage(&target, &spec);
    }
});
