//! CHSH: correlations per setting pair, S and its uncertainty and significance.
//! Input is plain counts per setting pair (optionally with accidental estimates and live
//! times); output is a [`ChshReport`] of plain numbers. Display is left to the caller.
//!
//! Inequality: Clauser, Horne, Shimony, Holt, Phys. Rev. Lett. 23, 880 (1969):
//! |S| ≤ 2 for local hidden-variable models; quantum bound 2√2: Cirel'son,
//! Lett. Math. Phys. 4, 93 (1980). For (|HH⟩+|VV⟩)/√2 with visibility V,
//! E(α, β) = V·cos 2(α − β), and S = 2√2·V at a=0°, a'=45°, b=22.5°, b'=67.5°.
//!
//! # Uncertainty of E
//! With x₊ = N₊₊ + N₋₋ (same outcome) and x₋ = N₊₋ + N₋₊ (different), E = (x₊ − x₋)/(x₊ + x₋).
//! Its partial derivatives are ∂E/∂x₊ = 2x₋/Σ², ∂E/∂x₋ = −2x₊/Σ² (Σ = x₊ + x₋), so for four
//! independent counts with variances vᵢ,
//! σ_E² = (4/Σ⁴)·(x₋²·(v₊₊ + v₋₋) + x₊²·(v₊₋ + v₋₊)).
//! For raw Poisson counts (vᵢ = Nᵢ) this is 4·x₊·x₋·(x₊ + x₋)/N⁴ = 4·N_same·N_diff/N³.
//! The same expression holds for rates (x = N/T, v = N/T²) and for accidental-corrected
//! counts (x = N − acc, v = N + σ_acc²), which is how both are handled here.

use crate::analysis::stats::{p_one_sided, quadrature};
use crate::engine::tables::Estimate;
use crate::{Error, Result};

/// Outcome combinations in the order used throughout: ++, +−, −+, −−.
pub const OUTCOMES: [&str; 4] = ["++", "+-", "-+", "--"];

/// Counts for one setting pair (Alice's analyzer at `angle_a_deg`, Bob's at `angle_b_deg`).
#[derive(Debug, Clone, PartialEq)]
pub struct SettingCounts {
    /// "a" or "a'".
    pub label_a: String,
    /// "b" or "b'".
    pub label_b: String,
    pub angle_a_deg: f64,
    pub angle_b_deg: f64,
    /// N₊₊, N₊₋, N₋₊, N₋₋.
    pub counts: [u64; 4],
    /// Accidental estimates per combination (same order), in counts.
    pub accidentals: Option<[Estimate; 4]>,
    /// One-detector-per-side set-ups measure each combination in its own run: the live
    /// time of each run in s. Counts are then turned into rates before E is formed.
    pub live_time_s: Option<[f64; 4]>,
}

/// A correlation E with its σ, and the combination values it was formed from.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Correlation {
    pub e: f64,
    pub sigma: f64,
    /// The four values E was formed from (counts, rates in Hz, or corrected), order ++, +−, −+, −−.
    pub values: [f64; 4],
    /// Their variances.
    pub variances: [f64; 4],
}

/// One setting pair's results.
#[derive(Debug, Clone, PartialEq)]
pub struct PairCorrelation {
    pub label_a: String,
    pub label_b: String,
    pub angle_a_deg: f64,
    pub angle_b_deg: f64,
    pub counts: [u64; 4],
    /// From raw counts (or raw rates when live times are given).
    pub raw: Correlation,
    /// Accidentals subtracted per combination; `None` without accidental estimates.
    pub corrected: Option<Correlation>,
}

/// S with one choice of which term carries the minus sign.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ChshVariant {
    /// Index (into [`ChshReport::pairs`], order ab, ab', a'b, a'b') of the negative term.
    pub minus_term: usize,
    pub s: f64,
    pub sigma: f64,
    /// (|S| − 2)/σ_S.
    pub violation_sigma: f64,
    /// One-sided normal p-value of `violation_sigma`.
    pub p_value: f64,
}

/// The four CHSH variants of one correlation set (raw or corrected).
#[derive(Debug, Clone, PartialEq)]
pub struct ChshSet {
    /// Index 1 (minus on E(a,b')) is the primary convention
    /// S = E(a,b) − E(a,b') + E(a',b) + E(a',b').
    pub variants: [ChshVariant; 4],
    /// Index of the variant with the largest |S|. Choosing it after looking at the data
    /// is a fourfold look-elsewhere: quote the primary convention unless it was fixed in advance.
    pub max_abs: usize,
}

impl ChshVariant {
    /// Whether |S| exceeds the local bound 2 at all (however weakly).
    pub fn violates_bound(&self) -> bool {
        self.s.abs() > 2.0
    }

    /// The significance in words: "+3.2 σ beyond the local bound 2, p = 6.9e-4", or, for
    /// |S| ≤ 2, plainly that there is no violation (a negative σ and a p-value near 1 say
    /// nothing a reader needs).
    pub fn verdict(&self) -> String {
        if !self.violates_bound() {
            return "no violation: |S| ≤ 2 (the local bound)".to_string();
        }
        let p = if self.p_value > 0.0 { format!("= {:.3e}", self.p_value) } else { "< 1e-300".to_string() };
        format!("{:+.1} σ beyond the local bound 2, p {p}", self.violation_sigma)
    }
}

impl ChshSet {
    pub fn primary(&self) -> &ChshVariant {
        &self.variants[PRIMARY_MINUS_TERM]
    }
    pub fn max(&self) -> &ChshVariant {
        &self.variants[self.max_abs]
    }
}

/// Index of the term with the minus sign in the primary convention: E(a,b').
pub const PRIMARY_MINUS_TERM: usize = 1;
/// Pair order in a report.
pub const PAIR_ORDER: [(&str, &str); 4] = [("a", "b"), ("a", "b'"), ("a'", "b"), ("a'", "b'")];

/// Everything computed for a CHSH measurement.
#[derive(Debug, Clone, PartialEq)]
pub struct ChshReport {
    /// Order ab, ab', a'b, a'b'.
    pub pairs: [PairCorrelation; 4],
    pub raw: ChshSet,
    /// Accidental-corrected: present only when every pair has accidental estimates.
    pub corrected: Option<ChshSet>,
    /// Whether E was formed from rates (live times given).
    pub from_rates: bool,
}

/// One display row per setting pair, for tables.
#[derive(Debug, Clone, PartialEq)]
pub struct CorrelationRow {
    pub pair: String,
    pub angle_a_deg: f64,
    pub angle_b_deg: f64,
    pub counts: [u64; 4],
    pub e_raw: Estimate,
    pub e_corrected: Option<Estimate>,
}

/// One display row per S variant.
#[derive(Debug, Clone, PartialEq)]
pub struct VariantRow {
    /// e.g. "E(a,b) - E(a,b') + E(a',b) + E(a',b')".
    pub formula: String,
    /// "raw" or "accidental-corrected".
    pub kind: &'static str,
    pub variant: ChshVariant,
    pub is_primary: bool,
    pub is_max: bool,
}

impl ChshReport {
    pub fn correlation_rows(&self) -> Vec<CorrelationRow> {
        self.pairs
            .iter()
            .map(|p| CorrelationRow {
                pair: format!("{},{}", p.label_a, p.label_b),
                angle_a_deg: p.angle_a_deg,
                angle_b_deg: p.angle_b_deg,
                counts: p.counts,
                e_raw: p.raw.estimate(),
                e_corrected: p.corrected.map(|c| c.estimate()),
            })
            .collect()
    }

    pub fn variant_rows(&self) -> Vec<VariantRow> {
        let mut rows = Vec::new();
        let sets = [("raw", Some(&self.raw)), ("accidental-corrected", self.corrected.as_ref())];
        for (kind, set) in sets {
            let Some(set) = set else { continue };
            for (i, v) in set.variants.iter().enumerate() {
                rows.push(VariantRow {
                    formula: variant_formula(i),
                    kind,
                    variant: *v,
                    is_primary: i == PRIMARY_MINUS_TERM,
                    is_max: i == set.max_abs,
                });
            }
        }
        rows
    }
}

/// The formula of the variant whose term `minus_term` is negative.
pub fn variant_formula(minus_term: usize) -> String {
    let mut s = String::new();
    for (i, (a, b)) in PAIR_ORDER.iter().enumerate() {
        let sign = if i == minus_term { "-" } else { "+" };
        if i == 0 && sign == "+" {
            s.push_str(&format!("E({a},{b})"));
        } else if i == 0 {
            s.push_str(&format!("-E({a},{b})"));
        } else {
            s.push_str(&format!(" {sign} E({a},{b})"));
        }
    }
    s
}

impl Correlation {
    pub fn estimate(&self) -> Estimate {
        Estimate { value: self.e, sigma: self.sigma }
    }

    /// E and σ_E from four combination values and variances (see the module doc).
    pub fn from_values(values: [f64; 4], variances: [f64; 4]) -> Correlation {
        let same = values[0] + values[3];
        let diff = values[1] + values[2];
        let total = same + diff;
        let e = (same - diff) / total;
        let var_same = variances[0] + variances[3];
        let var_diff = variances[1] + variances[2];
        let var = 4.0 * (diff * diff * var_same + same * same * var_diff) / total.powi(4);
        Correlation { e, sigma: var.sqrt(), values, variances }
    }
}

/// E from one setting pair: raw (`corrected = false`) or accidental-corrected.
/// Returns `None` for corrected without accidental estimates.
pub fn correlation(c: &SettingCounts, corrected: bool) -> Option<Correlation> {
    let acc = match (corrected, c.accidentals) {
        (false, _) => [Estimate { value: 0.0, sigma: 0.0 }; 4],
        (true, Some(a)) => a,
        (true, None) => return None,
    };
    let mut values = [0.0; 4];
    let mut variances = [0.0; 4];
    for i in 0..4 {
        let t = c.live_time_s.map_or(1.0, |t| t[i]);
        values[i] = (c.counts[i] as f64 - acc[i].value) / t;
        variances[i] = (c.counts[i] as f64 + acc[i].sigma * acc[i].sigma) / (t * t);
    }
    Some(Correlation::from_values(values, variances))
}

/// Check one setting pair's input: labels, positive live times, finite accidentals.
fn validate(c: &SettingCounts) -> Result<()> {
    let name = format!("setting pair ({},{})", c.label_a, c.label_b);
    if c.counts.iter().sum::<u64>() == 0 {
        return Err(Error::Usage(format!("{name}: all four counts are zero; E is undefined")));
    }
    if let Some(t) = c.live_time_s {
        if t.iter().any(|t| !(t.is_finite() && *t > 0.0)) {
            return Err(Error::Usage(format!("{name}: live times must be positive seconds, found {t:?}")));
        }
    }
    if let Some(a) = c.accidentals {
        if a.iter().any(|a| !(a.value.is_finite() && a.sigma.is_finite() && a.sigma >= 0.0)) {
            return Err(Error::Usage(format!("{name}: accidental estimates must be finite with σ ≥ 0")));
        }
    }
    Ok(())
}

/// Put four setting pairs in the order ab, ab', a'b, a'b' by their labels.
fn order_pairs(blocks: &[SettingCounts]) -> Result<[&SettingCounts; 4]> {
    let mut out: [Option<&SettingCounts>; 4] = [None; 4];
    for b in blocks {
        let idx = PAIR_ORDER.iter().position(|(la, lb)| b.label_a == *la && b.label_b == *lb).ok_or_else(|| {
            Error::Usage(format!(
                "setting pair ({},{}): labels must be a or a' for side A and b or b' for side B",
                b.label_a, b.label_b
            ))
        })?;
        if out[idx].replace(b).is_some() {
            return Err(Error::Usage(format!("setting pair ({},{}) given twice", b.label_a, b.label_b)));
        }
    }
    let missing: Vec<String> =
        PAIR_ORDER.iter().zip(&out).filter(|(_, o)| o.is_none()).map(|((a, b), _)| format!("({a},{b})")).collect();
    if !missing.is_empty() {
        return Err(Error::Usage(format!("CHSH needs four setting pairs; missing {}", missing.join(", "))));
    }
    Ok(out.map(|o| o.expect("checked above")))
}

/// The four variants of S from four correlations in pair order.
pub fn chsh_set(e: [Estimate; 4]) -> ChshSet {
    let sigma = quadrature(&e.map(|x| x.sigma));
    let variants: [ChshVariant; 4] = std::array::from_fn(|minus| {
        let s: f64 = e.iter().enumerate().map(|(i, x)| if i == minus { -x.value } else { x.value }).sum();
        let violation_sigma = (s.abs() - 2.0) / sigma;
        ChshVariant { minus_term: minus, s, sigma, violation_sigma, p_value: p_one_sided(violation_sigma) }
    });
    let max_abs = (0..4).fold(0, |best, i| if variants[i].s.abs() > variants[best].s.abs() { i } else { best });
    ChshSet { variants, max_abs }
}

/// The visibility V of the model E(α, β) = V·cos 2(α − β) (module doc) that fits the raw
/// correlations best: weighted least squares through the origin, V = Σ wᵢcᵢEᵢ / Σ wᵢcᵢ² with
/// cᵢ = cos 2(αᵢ − βᵢ) and wᵢ = 1/σᵢ², σ_V = 1/√(Σ wᵢcᵢ²) (one-parameter linear fit: Bevington
/// and Robinson, Data Reduction and Error Analysis, 3rd ed., ch. 6; from memory). `None` when
/// no pair has a usable σ and a non-zero cᵢ. Drawn as the model line of the CHSH plot.
pub fn model_visibility(report: &ChshReport) -> Option<Estimate> {
    let (mut num, mut den) = (0.0, 0.0);
    for p in &report.pairs {
        let c = (2.0 * (p.angle_a_deg - p.angle_b_deg).to_radians()).cos();
        if !(p.raw.sigma > 0.0 && p.raw.sigma.is_finite()) {
            continue;
        }
        let w = 1.0 / (p.raw.sigma * p.raw.sigma);
        num += w * c * p.raw.e;
        den += w * c * c;
    }
    (den > 0.0).then(|| Estimate { value: num / den, sigma: 1.0 / den.sqrt() })
}

/// Evaluate CHSH from four setting pairs labelled (a,b), (a,b'), (a',b), (a',b') in any order.
pub fn evaluate(blocks: &[SettingCounts]) -> Result<ChshReport> {
    for b in blocks {
        validate(b)?;
    }
    let ordered = order_pairs(blocks)?;
    let rates = ordered.iter().map(|b| b.live_time_s.is_some()).collect::<Vec<_>>();
    if rates.iter().any(|r| *r != rates[0]) {
        return Err(Error::Usage("CHSH: give live times for all four setting pairs or for none".into()));
    }
    let pairs = ordered.map(|b| PairCorrelation {
        label_a: b.label_a.clone(),
        label_b: b.label_b.clone(),
        angle_a_deg: b.angle_a_deg,
        angle_b_deg: b.angle_b_deg,
        counts: b.counts,
        raw: correlation(b, false).expect("raw always exists"),
        corrected: correlation(b, true),
    });
    let raw = chsh_set(pairs.each_ref().map(|p| p.raw.estimate()));
    let corrected = if pairs.iter().all(|p| p.corrected.is_some()) {
        Some(chsh_set(pairs.each_ref().map(|p| p.corrected.expect("checked").estimate())))
    } else {
        None
    };
    Ok(ChshReport { pairs, raw, corrected, from_rates: rates[0] })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn block(la: &str, lb: &str, counts: [u64; 4]) -> SettingCounts {
        SettingCounts {
            label_a: la.into(),
            label_b: lb.into(),
            angle_a_deg: 0.0,
            angle_b_deg: 0.0,
            counts,
            accidentals: None,
            live_time_s: None,
        }
    }

    #[test]
    fn sigma_e_matches_closed_form() {
        // Closed form 4·N_same·N_diff/N³ for independent Poisson counts (module doc derivation;
        // the same result follows from the binomial variance of E = 2p − 1, common practice).
        let c = correlation(&block("a", "b", [400, 100, 50, 450]), false).unwrap();
        let (same, diff, n): (f64, f64, f64) = (850.0, 150.0, 1000.0);
        assert!((c.e - 0.7).abs() < 1e-15);
        assert!((c.sigma - (4.0 * same * diff / (n * n * n)).sqrt()).abs() < 1e-15);
    }

    #[test]
    fn model_visibility_is_the_weighted_fit_through_the_origin() {
        // Pairs at α − β = 0° (c = +1) with E = +0.7, at 90° (c = −1) with E = −0.7 and the
        // same σ, and two at 45° (c = 0, no weight in the fit): the least-squares slope
        // through the origin is then (0.7 + 0.7)/2 = 0.7 with σ_V = σ_E/√2 (two equal-weight
        // points; Bevington and Robinson ch. 6, from memory). σ_E: the closed form above.
        let mut b = [
            block("a", "b", [400, 100, 50, 450]),
            block("a", "b'", [50, 450, 400, 100]),
            block("a'", "b", [250, 250, 250, 250]),
            block("a'", "b'", [250, 250, 250, 250]),
        ];
        for (x, beta) in b.iter_mut().zip([0.0, 90.0, 45.0, -45.0]) {
            x.angle_b_deg = beta;
        }
        let r = evaluate(&b).unwrap();
        let v = model_visibility(&r).unwrap();
        let sigma_e = (4.0 * 850.0 * 150.0 / 1e9_f64).sqrt();
        assert!((v.value - 0.7).abs() < 1e-12, "{v:?}");
        assert!((v.sigma - sigma_e / 2f64.sqrt()).abs() < 1e-12, "{v:?}");
    }

    #[test]
    fn verdict_says_plainly_when_there_is_no_violation() {
        // |S| ≤ 2 is the local bound (CHSH 1969): below it no σ or p-value is quoted.
        let below = ChshVariant { minus_term: 1, s: 1.2, sigma: 0.0046, violation_sigma: -174.2, p_value: 1.0 };
        assert_eq!(below.verdict(), "no violation: |S| ≤ 2 (the local bound)");
        let above = ChshVariant { minus_term: 1, s: -2.3, sigma: 0.1, violation_sigma: 3.0, p_value: 1.35e-3 };
        assert!(above.verdict().starts_with("+3.0 σ beyond the local bound 2, p = 1.350e-3"), "{}", above.verdict());
    }

    #[test]
    fn labels_are_checked() {
        let b = [block("a", "b", [1; 4]), block("a", "b'", [1; 4]), block("a'", "b", [1; 4])];
        assert!(matches!(evaluate(&b), Err(Error::Usage(m)) if m.contains("(a',b')")));
        let b = [block("x", "b", [1; 4])];
        assert!(evaluate(&b).is_err());
        let b = [block("a", "b", [0; 4])];
        assert!(evaluate(&b).is_err());
    }

    #[test]
    fn live_times_normalise_each_combination() {
        // Doubling one run's live time and its counts leaves the rate, hence E, unchanged.
        let mut b = block("a", "b", [400, 100, 100, 400]);
        b.live_time_s = Some([1.0; 4]);
        let e1 = correlation(&b, false).unwrap();
        b.counts[0] = 800;
        b.live_time_s = Some([2.0, 1.0, 1.0, 1.0]);
        let e2 = correlation(&b, false).unwrap();
        assert!((e1.e - e2.e).abs() < 1e-15);
        assert!(e2.sigma < e1.sigma, "more counts in one run must shrink σ_E");
    }

    #[test]
    fn formulas_name_the_minus_term() {
        assert_eq!(variant_formula(1), "E(a,b) - E(a,b') + E(a',b) + E(a',b')");
        assert_eq!(variant_formula(0), "-E(a,b) + E(a,b') + E(a',b) + E(a',b')");
    }
}
