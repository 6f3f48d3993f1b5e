//! Bell's original three-setting form |E(a,b) − E(a,c)| ≤ 1 + E(b,c)
//! (J. S. Bell, Physics 1, 195 (1964)), evaluated with σ from measured correlations.
//!
//! # Sign convention
//! Bell's form assumes perfect anti-correlation at equal settings, E(a,a) = −1 (the singlet,
//! ideal E = −cos θ between spin directions). For perfectly *correlated* states such as
//! (|HH⟩+|VV⟩)/√2 (ideal E = +cos 2(α−β)), we apply the form to −E, so that the ideal state
//! again reads E' = −cos θ with θ = 2(α−β): the test becomes |E(a,b) − E(a,c)| ≤ 1 − E(b,c).
//! [`Convention`] says which case a measurement is.

use crate::analysis::chsh::{correlation, SettingCounts};
use crate::analysis::stats::{p_one_sided, quadrature};
use crate::engine::tables::Estimate;
use crate::{Error, Result};

/// Which correlation sign the source has at equal settings.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Convention {
    /// E(a,a) = −1 (singlet-type): the form is applied to E as measured.
    AntiCorrelated,
    /// E(a,a) = +1 (e.g. (|HH⟩+|VV⟩)/√2): the form is applied to −E.
    Correlated,
}

/// The evaluated inequality.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Bell3Result {
    pub convention: Convention,
    /// The measured E(a,b), E(a,c), E(b,c) (before any sign flip).
    pub e_ab: Estimate,
    pub e_ac: Estimate,
    pub e_bc: Estimate,
    /// |E'(a,b) − E'(a,c)| with E' the convention-adjusted correlations.
    pub lhs: f64,
    /// 1 + E'(b,c).
    pub rhs: f64,
    /// lhs − rhs with σ = √(σ_ab² + σ_ac² + σ_bc²) (independent blocks); > 0 is a violation.
    pub margin: Estimate,
    /// margin / σ.
    pub violation_sigma: f64,
    /// One-sided normal p-value of `violation_sigma`.
    pub p_value: f64,
}

impl Bell3Result {
    pub fn violated(&self) -> bool {
        self.margin.value > 0.0
    }
}

/// Evaluate from three correlations.
pub fn evaluate(e_ab: Estimate, e_ac: Estimate, e_bc: Estimate, convention: Convention) -> Bell3Result {
    let sign = match convention {
        Convention::AntiCorrelated => 1.0,
        Convention::Correlated => -1.0,
    };
    let lhs = (sign * e_ab.value - sign * e_ac.value).abs();
    let rhs = 1.0 + sign * e_bc.value;
    let sigma = quadrature(&[e_ab.sigma, e_ac.sigma, e_bc.sigma]);
    let margin = Estimate { value: lhs - rhs, sigma };
    let violation_sigma = margin.value / sigma;
    Bell3Result {
        convention,
        e_ab,
        e_ac,
        e_bc,
        lhs,
        rhs,
        margin,
        violation_sigma,
        p_value: p_one_sided(violation_sigma),
    }
}

/// Angles equal modulo 180° (an analyzer setting) within 1e-6°.
fn same_setting(x_deg: f64, y_deg: f64) -> bool {
    let d = (x_deg - y_deg).rem_euclid(180.0);
    d < 1e-6 || 180.0 - d < 1e-6
}

/// Evaluate from setting-pair blocks: finds the blocks with analyzer angles (a,b), (a,c), (b,c)
/// (side A first) and forms E from each (accidental-corrected when `corrected`).
pub fn evaluate_blocks(
    blocks: &[SettingCounts],
    [a_deg, b_deg, c_deg]: [f64; 3],
    convention: Convention,
    corrected: bool,
) -> Result<Bell3Result> {
    let find = |x: f64, y: f64| -> Result<Estimate> {
        let blk = blocks
            .iter()
            .find(|k| same_setting(k.angle_a_deg, x) && same_setting(k.angle_b_deg, y))
            .ok_or_else(|| Error::Usage(format!("three-setting form: no block with analyzers at ({x}°, {y}°)")))?;
        let c = correlation(blk, corrected).ok_or_else(|| {
            Error::Usage(format!("three-setting form: block ({x}°, {y}°) has no accidental estimates"))
        })?;
        Ok(c.estimate())
    };
    Ok(evaluate(find(a_deg, b_deg)?, find(a_deg, c_deg)?, find(b_deg, c_deg)?, convention))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn setting_equality_is_modulo_half_turn() {
        assert!(same_setting(0.0, 180.0));
        assert!(same_setting(-22.5, 157.5));
        assert!(!same_setting(0.0, 90.0));
    }

    #[test]
    fn perfect_classical_correlation_saturates() {
        // E' = −1 everywhere (identical deterministic outcomes): |−1 + 1| = 0 ≤ 1 − 1 = 0,
        // the boundary case (Bell 1964, Physics 1, 195: equality for perfect anti-correlation).
        let m1 = Estimate { value: -1.0, sigma: 0.01 };
        let r = evaluate(m1, m1, m1, Convention::AntiCorrelated);
        assert!(r.margin.value.abs() < 1e-15 && !r.violated());
    }
}
