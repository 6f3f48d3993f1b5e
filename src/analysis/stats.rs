//! Statistics: Poisson intervals, normal p-values, error propagation.
//! The special functions come from statrs; quantiles are refined here to full precision
//! because statrs' gamma quantile stops after a few bisection/Newton steps.

use crate::engine::tables::Estimate;
use statrs::distribution::{Continuous, ContinuousCDF, Gamma, Normal};

/// A two-sided confidence interval `[lo, hi]` at `confidence` (e.g. 0.6827, 0.95).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Interval {
    pub lo: f64,
    pub hi: f64,
    pub confidence: f64,
}

/// One standard deviation of a Poisson count: √N (the observed count as the mean estimate).
pub fn poisson_sigma(n: u64) -> f64 {
    (n as f64).sqrt()
}

/// A count as an [`Estimate`] with Poisson σ.
pub fn poisson_estimate(n: u64) -> Estimate {
    Estimate { value: n as f64, sigma: poisson_sigma(n) }
}

/// Garwood's exact (central, equal-tailed) interval for a Poisson mean given `n` observed:
/// lo = Γ⁻¹(α/2; n, 1), hi = Γ⁻¹(1 − α/2; n + 1, 1), α = 1 − confidence; lo = 0 for n = 0.
/// (Garwood, Biometrika 28, 437 (1936); the gamma form equals ½χ²(2n) / ½χ²(2n+2).)
/// Returns `None` unless 0 < confidence < 1.
pub fn garwood_interval(n: u64, confidence: f64) -> Option<Interval> {
    if !(confidence > 0.0 && confidence < 1.0) {
        return None;
    }
    let alpha = 1.0 - confidence;
    let lo = if n == 0 { 0.0 } else { gamma_quantile(n as f64, alpha / 2.0) };
    let hi = gamma_quantile(n as f64 + 1.0, 1.0 - alpha / 2.0);
    Some(Interval { lo, hi, confidence })
}

/// Quantile of the unit-rate gamma distribution with `shape` > 0 at 0 < p < 1:
/// statrs' estimate, then safeguarded Newton steps on its CDF (bisection where Newton
/// leaves the bracket). Agrees with SciPy to ~1e-10 relative up to shape 10⁶ (tested),
/// limited by statrs' incomplete-gamma accuracy.
pub fn gamma_quantile(shape: f64, p: f64) -> f64 {
    let g = Gamma::new(shape, 1.0).expect("shape > 0");
    let (mut lo, mut hi) = (0.0_f64, shape.max(1.0));
    while g.cdf(hi) < p {
        lo = hi;
        hi *= 2.0;
    }
    let guess = g.inverse_cdf(p);
    let mut x = if guess.is_finite() { guess.clamp(lo, hi) } else { 0.5 * (lo + hi) };
    for _ in 0..200 {
        let f = g.cdf(x) - p;
        if f > 0.0 {
            hi = x
        } else {
            lo = x
        }
        let pdf = g.pdf(x);
        let newton = if pdf.is_finite() && pdf > 0.0 { x - f / pdf } else { f64::NAN };
        if (newton - x).abs() <= 1e-15 * x || hi - lo <= 1e-15 * hi || f == 0.0 {
            return if newton >= lo && newton <= hi { newton } else { x };
        }
        // Fall back to bisection when Newton leaves the bracket.
        x = if newton >= lo && newton <= hi { newton } else { 0.5 * (lo + hi) };
    }
    x
}

fn std_normal() -> Normal {
    Normal::new(0.0, 1.0).expect("unit normal")
}

/// One-sided upper-tail p-value of a standard normal: P(Z > z) = erfc(z/√2)/2. The
/// complementary error function is libm's port of the FreeBSD/musl one (error < 1 ulp);
/// statrs' `Normal::sf` strays by ~5·10⁻¹¹ relative near z = 10, which the table checks
/// against SciPy (tests/derived_columns.rs, 1e-12 relative) do not allow.
pub fn p_one_sided(z: f64) -> f64 {
    if z.is_nan() {
        return f64::NAN;
    }
    0.5 * libm::erfc(z / std::f64::consts::SQRT_2)
}

/// The z for which P(Z > z) = p (inverse of [`p_one_sided`]).
pub fn z_one_sided(p: f64) -> f64 {
    std_normal().inverse_cdf(1.0 - p)
}

/// √(Σ σᵢ²): the σ of a sum or difference of independent quantities.
pub fn quadrature(sigmas: &[f64]) -> f64 {
    sigmas.iter().map(|s| s * s).sum::<f64>().sqrt()
}

/// Linear (first-order) propagation: σ² = gᵀ C g for gradient `g` and covariance `cov`.
pub fn propagate<const N: usize>(grad: &[f64; N], cov: &[[f64; N]; N]) -> f64 {
    let mut var = 0.0;
    for i in 0..N {
        for j in 0..N {
            var += grad[i] * cov[i][j] * grad[j];
        }
    }
    var.max(0.0).sqrt()
}

/// a − b for independent estimates.
pub fn difference(a: Estimate, b: Estimate) -> Estimate {
    Estimate { value: a.value - b.value, sigma: quadrature(&[a.sigma, b.sigma]) }
}

/// a / b for independent estimates (first order).
pub fn ratio(a: Estimate, b: Estimate) -> Estimate {
    let r = a.value / b.value;
    let rel = quadrature(&[a.sigma / a.value, b.sigma / b.value]);
    Estimate { value: r, sigma: (r * rel).abs() }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn normal_tail_values() {
        // Standard normal table values (from memory, any statistics handbook):
        // P(Z > 1.96) = 0.0249979, P(Z > 3) = 1.349898e-3, P(Z > 5) = 2.866516e-7.
        assert!((p_one_sided(1.96) - 0.0249979).abs() < 1e-6);
        assert!((p_one_sided(3.0) - 1.349898e-3).abs() < 1e-8);
        assert!((p_one_sided(5.0) / 2.866516e-7 - 1.0).abs() < 1e-5);
        assert!((z_one_sided(p_one_sided(2.5)) - 2.5).abs() < 1e-9);
    }

    #[test]
    fn garwood_small_counts() {
        // Garwood 95% limits, tabulated e.g. in Gehrels, ApJ 303, 336 (1986) (from memory):
        // n = 0 → [0, 3.689]; n = 1 → [0.0253, 5.572]; n = 10 → [4.795, 18.39].
        let i0 = garwood_interval(0, 0.95).unwrap();
        assert_eq!(i0.lo, 0.0);
        assert!((i0.hi - 3.6889).abs() < 1e-3, "{i0:?}");
        let i1 = garwood_interval(1, 0.95).unwrap();
        assert!((i1.lo - 0.02532).abs() < 1e-4 && (i1.hi - 5.5716).abs() < 1e-3);
        let i10 = garwood_interval(10, 0.95).unwrap();
        assert!((i10.lo - 4.7954).abs() < 1e-3 && (i10.hi - 18.390).abs() < 1e-2);
        assert!(garwood_interval(5, 1.0).is_none());
    }

    #[test]
    fn propagation_of_a_ratio() {
        // σ of x/y, independent: (x/y)·√((σx/x)² + (σy/y)²) (standard first-order rule).
        let r = ratio(Estimate { value: 10.0, sigma: 1.0 }, Estimate { value: 5.0, sigma: 0.5 });
        assert!((r.value - 2.0).abs() < 1e-15);
        assert!((r.sigma - 2.0 * (0.02f64).sqrt()).abs() < 1e-12);
        let g = propagate(&[1.0, -1.0], &[[4.0, 0.0], [0.0, 9.0]]);
        assert!((g - 13f64.sqrt()).abs() < 1e-12);
    }
}
