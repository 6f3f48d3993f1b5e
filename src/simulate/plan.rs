//! Block plans: which analyzer angles each block of a run is measured at, for the
//! four-detector set-up (one block per setting pair) or one detector per side (four blocks
//! per pair, analyzers at α or α+90°, β or β+90°).

use super::Setting;
use crate::manifest::{Outcomes, Port, Setup};

/// A named analyzer setting of one side, e.g. `a'` at 45°.
#[derive(Debug, Clone, PartialEq)]
pub struct SettingLabel {
    pub label: String,
    pub angle_deg: f64,
}

impl SettingLabel {
    pub fn new(label: &str, angle_deg: f64) -> Self {
        SettingLabel { label: label.to_string(), angle_deg }
    }
}

/// One block to measure: the setting labels it belongs to and the physical angles.
#[derive(Debug, Clone, PartialEq)]
pub struct BlockPlan {
    /// File-name friendly: labels with `'` spelled `p` (`ab`, `apbp`), plus `_pm` etc.
    pub name: String,
    pub alice: String,
    pub bob: String,
    /// One detector per side only: which outcome pair this block's + detectors stand for.
    pub outcomes: Option<Outcomes>,
    /// Physical analyzer angles (setting angle, plus 90° where the outcome is −).
    pub setting: Setting,
}

/// The CHSH labels of the scenario: Alice a, a'; Bob b, b' at the given angles (degrees).
pub fn chsh_labels(a_deg: f64, a2_deg: f64, b_deg: f64, b2_deg: f64) -> (Vec<SettingLabel>, Vec<SettingLabel>) {
    (
        vec![SettingLabel::new("a", a_deg), SettingLabel::new("a'", a2_deg)],
        vec![SettingLabel::new("b", b_deg), SettingLabel::new("b'", b2_deg)],
    )
}

/// Every (Alice, Bob) setting pair, Alice's label outermost; expanded to four blocks per
/// pair (outcomes ++, +−, −+, −−) for one detector per side.
pub fn plan_blocks(setup: Setup, alice: &[SettingLabel], bob: &[SettingLabel]) -> Vec<BlockPlan> {
    let mut plans = Vec::new();
    for a in alice {
        for b in bob {
            let base = format!("{}{}", file_label(&a.label), file_label(&b.label));
            match setup {
                Setup::FourDetectors => plans.push(BlockPlan {
                    name: base,
                    alice: a.label.clone(),
                    bob: b.label.clone(),
                    outcomes: None,
                    setting: Setting { alpha_deg: a.angle_deg, beta_deg: b.angle_deg },
                }),
                Setup::OnePerSide => plans.extend(Outcomes::ALL.iter().map(|o| BlockPlan {
                    name: format!("{base}_{}{}", port_word(o.alice), port_word(o.bob)),
                    alice: a.label.clone(),
                    bob: b.label.clone(),
                    outcomes: Some(*o),
                    setting: Setting {
                        alpha_deg: a.angle_deg + o.alice.extra_angle_deg(),
                        beta_deg: b.angle_deg + o.bob.extra_angle_deg(),
                    },
                })),
            }
        }
    }
    plans
}

fn file_label(label: &str) -> String {
    label.chars().map(|c| if c.is_ascii_alphanumeric() || c == '-' || c == '_' { c } else { 'p' }).collect()
}

fn port_word(p: Port) -> char {
    match p {
        Port::Plus => 'p',
        Port::Minus => 'm',
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn one_per_side_rotates_for_minus_outcomes() {
        let (a, b) = chsh_labels(0.0, 45.0, 22.5, 67.5);
        assert_eq!(plan_blocks(Setup::FourDetectors, &a, &b).len(), 4);
        let p = plan_blocks(Setup::OnePerSide, &a, &b);
        assert_eq!(p.len(), 16);
        let mp = p.iter().find(|x| x.name == "apbp_mp").unwrap();
        assert_eq!(mp.setting, Setting { alpha_deg: 135.0, beta_deg: 67.5 });
    }
}
