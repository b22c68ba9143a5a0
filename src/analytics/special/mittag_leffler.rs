//! TEMPORARY placeholder (series only) until the real module lands.
#[derive(Debug, Clone, PartialEq)]
pub enum MittagLefflerError {
    Bad,
}
impl std::fmt::Display for MittagLefflerError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "bad")
    }
}
impl std::error::Error for MittagLefflerError {}
pub fn mittag_leffler(alpha: f64, beta: f64, z: f64) -> Result<f64, MittagLefflerError> {
    Ok(MittagLefflerSeries::new(alpha, beta)?.eval(z))
}
pub struct MittagLefflerSeries {
    inv: Vec<f64>,
}
impl MittagLefflerSeries {
    pub fn new(alpha: f64, beta: f64) -> Result<Self, MittagLefflerError> {
        Ok(Self { inv: (0..200).map(|k| 1.0 / libm::tgamma(alpha * k as f64 + beta)).collect() })
    }
    pub fn eval(&self, z: f64) -> f64 {
        self.eval_with_derivative(z).0
    }
    pub fn eval_with_derivative(&self, z: f64) -> (f64, f64) {
        let mut s = 0.0;
        let mut d = 0.0;
        let mut p = 1.0;
        for k in 0..200 {
            s += p * self.inv[k];
            if k + 1 < 200 {
                d += (k + 1) as f64 * p * self.inv[k + 1];
            }
            p *= z;
        }
        (s, d)
    }
}
