//! The analysis part of the file layout: `/chsh` (correlations and S variants),
//! `/visibility` (fits and their points) and `/bell3` (the three-setting form).
//! Like [`super::layout`], every path, dtype and unit here is in docs/hdf5-layout.md.

use super::{AttrValue, ColumnData, Group, Table};
use crate::analysis::bell3::Bell3Result;
use crate::analysis::chsh::ChshReport;
use crate::analysis::visibility::{AnglePoint, VisibilityFit};

/// The caution stored beside every S value.
pub const CAUTION: &str = "p-values assume independent, identically distributed trials and fair sampling; \
this is not a loophole-free Bell test and not a key-security certificate";

/// `/chsh`: a `correlations` table (one row per setting pair) and an `s_values` table
/// (four sign variants, raw and accidental-corrected).
pub fn chsh_group(r: &ChshReport) -> Group {
    let mut g = Group::new("chsh");
    let primary = r.raw.primary();
    g.attrs = vec![
        ("s_raw".into(), AttrValue::F64(primary.s)),
        ("s_raw_sigma".into(), AttrValue::F64(primary.sigma)),
        ("violation_raw_sigma".into(), AttrValue::F64(primary.violation_sigma)),
        ("p_value_raw".into(), AttrValue::F64(primary.p_value)),
        ("from_rates".into(), AttrValue::U64(r.from_rates as u64)),
        ("caution".into(), AttrValue::Str(CAUTION.into())),
    ];
    if let Some(c) = &r.corrected {
        g.attrs.push(("s_corrected".into(), AttrValue::F64(c.primary().s)));
        g.attrs.push(("s_corrected_sigma".into(), AttrValue::F64(c.primary().sigma)));
    }
    let rows = r.correlation_rows();
    let f = |v: Vec<f64>| ColumnData::F64(v);
    let nan = f64::NAN;
    let corr = Table::new("correlations")
        .col("setting_pair", "", ColumnData::Str(rows.iter().map(|x| x.pair.clone()).collect()))
        .col("angle_a_deg", "deg", f(rows.iter().map(|x| x.angle_a_deg).collect()))
        .col("angle_b_deg", "deg", f(rows.iter().map(|x| x.angle_b_deg).collect()))
        .col("n_pp", "counts", ColumnData::U64(rows.iter().map(|x| x.counts[0]).collect()))
        .col("n_pm", "counts", ColumnData::U64(rows.iter().map(|x| x.counts[1]).collect()))
        .col("n_mp", "counts", ColumnData::U64(rows.iter().map(|x| x.counts[2]).collect()))
        .col("n_mm", "counts", ColumnData::U64(rows.iter().map(|x| x.counts[3]).collect()))
        .col("e_raw", "1", f(rows.iter().map(|x| x.e_raw.value).collect()))
        .col("e_raw_sigma", "1", f(rows.iter().map(|x| x.e_raw.sigma).collect()))
        .col("e_corrected", "1", f(rows.iter().map(|x| x.e_corrected.map_or(nan, |e| e.value)).collect()))
        .col("e_corrected_sigma", "1", f(rows.iter().map(|x| x.e_corrected.map_or(nan, |e| e.sigma)).collect()));
    let vs = r.variant_rows();
    let s_values = Table::new("s_values")
        .col("kind", "", ColumnData::Str(vs.iter().map(|v| v.kind.to_string()).collect()))
        .col("formula", "", ColumnData::Str(vs.iter().map(|v| v.formula.clone()).collect()))
        .col("s", "1", f(vs.iter().map(|v| v.variant.s).collect()))
        .col("s_sigma", "1", f(vs.iter().map(|v| v.variant.sigma).collect()))
        .col("violation_sigma", "1", f(vs.iter().map(|v| v.variant.violation_sigma).collect()))
        .col("p_value", "1", f(vs.iter().map(|v| v.variant.p_value).collect()))
        .col("is_primary", "1", ColumnData::U64(vs.iter().map(|v| v.is_primary as u64).collect()))
        .col("is_max", "1", ColumnData::U64(vs.iter().map(|v| v.is_max as u64).collect()));
    g.tables = vec![corr, s_values];
    g
}

/// `/visibility`: a `fits` table (one row per basis) and a `points_<basis>` table each.
pub fn visibility_group(fits: &[(VisibilityFit, Vec<AnglePoint>)]) -> Group {
    let mut g = Group::new("visibility");
    let f = |v: Vec<f64>| ColumnData::F64(v);
    g.tables.push(
        Table::new("fits")
            .col("basis", "", ColumnData::Str(fits.iter().map(|(x, _)| x.label.clone()).collect()))
            .col("amplitude", "counts", f(fits.iter().map(|(x, _)| x.amplitude.value).collect()))
            .col("amplitude_sigma", "counts", f(fits.iter().map(|(x, _)| x.amplitude.sigma).collect()))
            .col("visibility", "1", f(fits.iter().map(|(x, _)| x.visibility.value).collect()))
            .col("visibility_sigma", "1", f(fits.iter().map(|(x, _)| x.visibility.sigma).collect()))
            .col("theta0_deg", "deg", f(fits.iter().map(|(x, _)| x.phase_deg.value).collect()))
            .col("theta0_sigma_deg", "deg", f(fits.iter().map(|(x, _)| x.phase_deg.sigma).collect()))
            .col("reduced_chi2", "1", f(fits.iter().map(|(x, _)| x.reduced_chi2).collect())),
    );
    for (fit, pts) in fits {
        g.tables.push(
            Table::new(format!("points_{}", sanitize(&fit.label)))
                .col("angle_deg", "deg", f(pts.iter().map(|p| p.angle_deg).collect()))
                .col("counts", "counts", ColumnData::U64(pts.iter().map(|p| p.counts).collect())),
        );
    }
    g
}

/// `/bell3`: the three-setting form as attributes.
pub fn bell3_group(r: &Bell3Result, angles_deg: [f64; 3]) -> Group {
    let mut g = Group::new("bell3");
    g.attrs = vec![
        ("convention".into(), AttrValue::Str(convention_name(r.convention).into())),
        ("angles_deg".into(), AttrValue::Str(serde_json::to_string(&angles_deg).unwrap_or_default())),
        ("e_ab".into(), AttrValue::F64(r.e_ab.value)),
        ("e_ac".into(), AttrValue::F64(r.e_ac.value)),
        ("e_bc".into(), AttrValue::F64(r.e_bc.value)),
        ("lhs".into(), AttrValue::F64(r.lhs)),
        ("rhs".into(), AttrValue::F64(r.rhs)),
        ("margin".into(), AttrValue::F64(r.margin.value)),
        ("margin_sigma".into(), AttrValue::F64(r.margin.sigma)),
        ("violation_sigma".into(), AttrValue::F64(r.violation_sigma)),
        ("p_value".into(), AttrValue::F64(r.p_value)),
    ];
    g
}

/// The convention as `--bell3-convention` spells it.
pub fn convention_name(c: crate::analysis::bell3::Convention) -> &'static str {
    use crate::analysis::bell3::Convention;
    match c {
        Convention::Correlated => "correlated",
        Convention::AntiCorrelated => "anti-correlated",
    }
}

/// `a'` → `a_prime`, anything else non-alphanumeric → `_`.
pub fn sanitize(label: &str) -> String {
    label.replace('\'', "_prime").chars().map(|c| if c.is_ascii_alphanumeric() { c } else { '_' }).collect()
}
