//! Visibility fit N(θ) = A·(1 + V·cos 2(θ − θ0)) to counts at several analyzer angles.
//! The model is linear in (A, B = A·V·cos 2θ0, C = A·V·sin 2θ0): weighted linear least
//! squares with Poisson weights 1/max(N, 1), covariance from the inverse normal matrix.

use crate::analysis::stats::propagate;
use crate::engine::tables::Estimate;
use crate::{Error, Result};

/// Counts at one analyzer angle.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct AnglePoint {
    pub angle_deg: f64,
    pub counts: u64,
}

/// Result of one fit (one basis).
#[derive(Debug, Clone, PartialEq)]
pub struct VisibilityFit {
    /// Basis or pair name, for titles.
    pub label: String,
    /// Mean count A.
    pub amplitude: Estimate,
    pub visibility: Estimate,
    /// θ0 in degrees, in (−90°, 90°].
    pub phase_deg: Estimate,
    /// Linear parameters (A, B, C) and their covariance.
    pub params: [f64; 3],
    pub covariance: [[f64; 3]; 3],
    /// Σ w·(N − model)².
    pub chi2: f64,
    /// points − 3.
    pub dof: usize,
    /// χ²/dof (NaN when dof = 0).
    pub reduced_chi2: f64,
}

impl VisibilityFit {
    /// The fitted count at `angle_deg`.
    pub fn model(&self, angle_deg: f64) -> f64 {
        let [a, b, c] = self.params;
        let t = 2.0 * angle_deg.to_radians();
        a + b * t.cos() + c * t.sin()
    }
}

/// Basis functions of the linear model at θ.
fn basis(angle_deg: f64) -> [f64; 3] {
    let t = 2.0 * angle_deg.to_radians();
    [1.0, t.cos(), t.sin()]
}

/// Fit the points of one basis. Needs at least three points at angles distinct modulo 180°.
pub fn fit_visibility(label: &str, points: &[AnglePoint]) -> Result<VisibilityFit> {
    if points.iter().any(|p| !p.angle_deg.is_finite()) {
        return Err(Error::Usage(format!("visibility fit {label}: angles must be finite degrees")));
    }
    let mut normal = [[0.0; 3]; 3];
    let mut rhs = [0.0; 3];
    for p in points {
        let f = basis(p.angle_deg);
        let w = 1.0 / (p.counts.max(1) as f64);
        for i in 0..3 {
            rhs[i] += w * f[i] * p.counts as f64;
            for j in 0..3 {
                normal[i][j] += w * f[i] * f[j];
            }
        }
    }
    let covariance = invert3(&normal).ok_or_else(|| {
        Error::Usage(format!(
            "visibility fit {label}: needs at least 3 points at angles distinct modulo 180°, got {}",
            points.len()
        ))
    })?;
    let params: [f64; 3] = std::array::from_fn(|i| (0..3).map(|j| covariance[i][j] * rhs[j]).sum());
    let chi2 = points
        .iter()
        .map(|p| {
            let m: f64 = basis(p.angle_deg).iter().zip(&params).map(|(f, q)| f * q).sum();
            (p.counts as f64 - m).powi(2) / (p.counts.max(1) as f64)
        })
        .sum::<f64>();
    let dof = points.len().saturating_sub(3);
    let reduced_chi2 = if dof > 0 { chi2 / dof as f64 } else { f64::NAN };
    let (visibility, phase_deg) = derived(&params, &covariance);
    let amplitude = Estimate { value: params[0], sigma: covariance[0][0].max(0.0).sqrt() };
    Ok(VisibilityFit {
        label: label.to_string(),
        amplitude,
        visibility,
        phase_deg,
        params,
        covariance,
        chi2,
        dof,
        reduced_chi2,
    })
}

/// V = √(B²+C²)/A and θ0 = ½·atan2(C, B) with first-order σ.
fn derived(p: &[f64; 3], cov: &[[f64; 3]; 3]) -> (Estimate, Estimate) {
    let [a, b, c] = *p;
    let r = b.hypot(c);
    let v = r / a;
    let grad_v = [-r / (a * a), b / (a * r), c / (a * r)];
    let theta = 0.5 * c.atan2(b);
    let grad_t = [0.0, -0.5 * c / (r * r), 0.5 * b / (r * r)];
    let vis = Estimate { value: v, sigma: propagate(&grad_v, cov) };
    let phase = Estimate { value: theta.to_degrees(), sigma: propagate(&grad_t, cov).to_degrees() };
    (vis, phase)
}

/// Inverse of a symmetric 3×3 matrix by cofactors; `None` when (near-)singular.
fn invert3(m: &[[f64; 3]; 3]) -> Option<[[f64; 3]; 3]> {
    let cof = |r0: usize, r1: usize, c0: usize, c1: usize| m[r0][c0] * m[r1][c1] - m[r0][c1] * m[r1][c0];
    let adj = [
        [cof(1, 2, 1, 2), -cof(0, 2, 1, 2), cof(0, 1, 1, 2)],
        [-cof(1, 2, 0, 2), cof(0, 2, 0, 2), -cof(0, 1, 0, 2)],
        [cof(1, 2, 0, 1), -cof(0, 2, 0, 1), cof(0, 1, 0, 1)],
    ];
    let det = m[0][0] * adj[0][0] + m[0][1] * adj[1][0] + m[0][2] * adj[2][0];
    let scale = m.iter().flatten().map(|x| x.abs()).fold(0.0, f64::max);
    if det.is_nan() || det.abs() <= 1e-12 * scale.powi(3) {
        return None;
    }
    Some(adj.map(|row| row.map(|x| x / det)))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn inverse_times_matrix_is_identity() {
        let m = [[4.0, 1.0, 0.5], [1.0, 3.0, 0.2], [0.5, 0.2, 2.0]];
        let inv = invert3(&m).unwrap();
        for (i, row) in m.iter().enumerate() {
            for (j, want) in [[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]][i].iter().enumerate() {
                let p: f64 = (0..3).map(|k| row[k] * inv[k][j]).sum();
                assert!((p - want).abs() < 1e-14);
            }
        }
        assert!(invert3(&[[1.0, 1.0, 0.0], [1.0, 1.0, 0.0], [0.0, 0.0, 1.0]]).is_none());
    }

    #[test]
    fn too_few_angles_is_an_error() {
        // 0° and 180° are the same analyzer setting (period 180°): only two distinct angles.
        let pts = [0.0, 90.0, 180.0].map(|a| AnglePoint { angle_deg: a, counts: 100 });
        assert!(fit_visibility("H/V", &pts).is_err());
    }
}
