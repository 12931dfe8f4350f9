//! The built-in table of XPS relative sensitivity factors, `stages/data/xps_sensitivity.csv`
//! (every row names its published source; see the file header).

use crate::quant_util::{cell_number, read_table};
use crate::stage::StageError;
use std::sync::OnceLock;

pub const FILE: &str = "stages/data/xps_sensitivity.csv";
const TEXT: &str = include_str!("../../data/xps_sensitivity.csv");

#[derive(Clone, Debug, PartialEq)]
pub struct Rsf {
    pub set: String,
    pub element: String,
    pub level: String,
    pub rsf: f64,
    pub source: String,
}

fn parse() -> Result<Vec<Rsf>, StageError> {
    let rows = read_table(FILE, TEXT, &["set", "element", "level", "rsf", "source"])?;
    rows.iter()
        .enumerate()
        .map(|(i, r)| {
            Ok(Rsf {
                set: r[0].clone(),
                element: r[1].clone(),
                level: r[2].clone(),
                rsf: cell_number(FILE, i, &r[3])?,
                source: r[4].clone(),
            })
        })
        .collect()
}

/// Every row of the table (parsed once).
pub fn table() -> Result<&'static [Rsf], StageError> {
    static T: OnceLock<Result<Vec<Rsf>, StageError>> = OnceLock::new();
    T.get_or_init(parse)
        .as_ref()
        .map(|v| v.as_slice())
        .map_err(Clone::clone)
}

/// The factor for an element and core level in a set.
pub fn lookup(set: &str, element: &str, level: &str) -> Result<&'static Rsf, StageError> {
    table()?
        .iter()
        .find(|r| r.set == set && r.element.eq_ignore_ascii_case(element) && r.level == level)
        .ok_or_else(|| {
            StageError::input(format!(
                "no sensitivity factor for {element} {level} in the built-in set '{set}' ({FILE}); give rsf in the options"
            ))
        })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_row_has_a_source_and_a_positive_factor() {
        let t = table().unwrap();
        assert!(t.len() >= 20);
        for r in t {
            assert!(!r.source.trim().is_empty(), "{r:?}");
            assert!(r.rsf > 0.0);
        }
        // The reference lines of each set are 1 by definition.
        assert_eq!(lookup("scofield_al_ka", "C", "1s").unwrap().rsf, 1.0);
        assert_eq!(lookup("wagner1981", "F", "1s").unwrap().rsf, 1.0);
        // Wagner et al., Surf. Interface Anal. 3 (1981) 211, area factors as reproduced from
        // Practical Surface Analysis Vol. 1, 2nd ed. (1990), Appendix 6, at
        // http://202.38.64.11/~mams/escalab/sfactors.html (checked 2026-12-02).
        for (el, lv, want) in [
            ("C", "1s", 0.25),
            ("N", "1s", 0.42),
            ("O", "1s", 0.66),
            ("Na", "1s", 2.3),
            ("Si", "2p", 0.27),
            ("S", "2p", 0.54),
            ("Cl", "2p", 0.73),
        ] {
            let f = lookup("wagner1981", el, lv).unwrap().rsf;
            assert!((f - want).abs() < 1e-9, "{el} {lv}: {f}");
        }
    }
}
