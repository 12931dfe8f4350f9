//! Built-in tables for EDS: characteristic line energies (`stages/data/xray_lines.csv`)
//! and standard atomic weights (`stages/data/atomic_masses.csv`); every row names its
//! source.

use crate::quant_util::{cell_number, read_table};
use crate::stage::StageError;
use std::sync::OnceLock;

pub const LINES_FILE: &str = "stages/data/xray_lines.csv";
pub const MASSES_FILE: &str = "stages/data/atomic_masses.csv";
const LINES: &str = include_str!("../../data/xray_lines.csv");
const MASSES: &str = include_str!("../../data/atomic_masses.csv");

#[derive(Clone, Debug, PartialEq)]
pub struct Line {
    pub z: u32,
    pub element: String,
    /// Siegbahn label as printed, e.g. `Kα1`.
    pub line: String,
    pub energy_kev: f64,
    pub source: String,
}

#[derive(Clone, Debug, PartialEq)]
pub struct Mass {
    pub z: u32,
    pub element: String,
    pub mass: f64,
    pub source: String,
}

fn parse_z(file: &str, i: usize, s: &str) -> Result<u32, StageError> {
    s.parse()
        .map_err(|_| StageError::data(file, Some(i + 2), format!("'{s}' is not an atomic number")))
}

pub fn lines() -> Result<&'static [Line], StageError> {
    static T: OnceLock<Result<Vec<Line>, StageError>> = OnceLock::new();
    T.get_or_init(|| {
        read_table(
            LINES_FILE,
            LINES,
            &["z", "element", "line", "energy_kev", "source"],
        )?
        .iter()
        .enumerate()
        .map(|(i, r)| {
            Ok(Line {
                z: parse_z(LINES_FILE, i, &r[0])?,
                element: r[1].clone(),
                line: r[2].clone(),
                energy_kev: cell_number(LINES_FILE, i, &r[3])?,
                source: r[4].clone(),
            })
        })
        .collect()
    })
    .as_ref()
    .map(|v| v.as_slice())
    .map_err(Clone::clone)
}

pub fn masses() -> Result<&'static [Mass], StageError> {
    static T: OnceLock<Result<Vec<Mass>, StageError>> = OnceLock::new();
    T.get_or_init(|| {
        read_table(
            MASSES_FILE,
            MASSES,
            &["z", "element", "atomic_mass", "source"],
        )?
        .iter()
        .enumerate()
        .map(|(i, r)| {
            Ok(Mass {
                z: parse_z(MASSES_FILE, i, &r[0])?,
                element: r[1].clone(),
                mass: cell_number(MASSES_FILE, i, &r[2])?,
                source: r[3].clone(),
            })
        })
        .collect()
    })
    .as_ref()
    .map(|v| v.as_slice())
    .map_err(Clone::clone)
}

/// Folds a line or source name for matching: lower case, α→a, β→b, γ→g, no spaces,
/// underscores or hyphens ("Cu Kα1", "cu_ka1" and "CuKa1" are the same).
pub fn fold_name(s: &str) -> String {
    s.chars()
        .filter(|c| !c.is_whitespace() && *c != '_' && *c != '-')
        .map(|c| match c {
            'α' => 'a',
            'β' => 'b',
            'γ' => 'g',
            c => c.to_ascii_lowercase(),
        })
        .collect()
}

/// A line by name, e.g. "Cu Ka1" or "Cu Kα1".
pub fn find_line(name: &str) -> Result<&'static Line, StageError> {
    let key = fold_name(name);
    lines()?
        .iter()
        .find(|l| fold_name(&format!("{}{}", l.element, l.line)) == key)
        .ok_or_else(|| {
            StageError::input(format!(
                "no line '{name}' in {LINES_FILE} (write e.g. 'Cu Ka1', 'Mo La1')"
            ))
        })
}

pub fn atomic_mass(element: &str) -> Result<&'static Mass, StageError> {
    masses()?
        .iter()
        .find(|m| m.element.eq_ignore_ascii_case(element))
        .ok_or_else(|| {
            StageError::input(format!("no atomic mass for '{element}' in {MASSES_FILE}"))
        })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tables_parse_and_every_row_has_a_source() {
        let l = lines().unwrap();
        assert!(l.len() > 250);
        assert!(l
            .iter()
            .all(|r| !r.source.trim().is_empty() && r.energy_kev > 0.0));
        // The main lines cover Z = 5 (B) to 83 (Bi).
        assert_eq!(l.iter().map(|r| r.z).min(), Some(5));
        assert_eq!(l.iter().map(|r| r.z).max(), Some(83));
        let m = masses().unwrap();
        assert!(m
            .iter()
            .all(|r| !r.source.trim().is_empty() && r.mass > 0.0));
        // Every element with a line has an atomic mass.
        for r in l {
            assert!(atomic_mass(&r.element).is_ok(), "{}", r.element);
        }
    }

    #[test]
    fn atomic_masses_spot_checked() {
        // Meija et al., Atomic weights of the elements 2013, Pure Appl. Chem. 88 (2016)
        // 265, abstract, rounded to five significant figures: Al 26.981 5385 -> 26.982,
        // Co 58.933 194 -> 58.933, Mo 95.95, Cd 112.414 -> 112.41, Au 196.966 569 -> 196.97.
        for (el, m) in [
            ("Al", 26.982),
            ("Co", 58.933),
            ("Mo", 95.95),
            ("Cd", 112.41),
            ("Au", 196.97),
        ] {
            let r = atomic_mass(el).unwrap();
            assert_eq!(r.mass, m, "{el}");
            assert!(r.source.contains("Meija") && !r.source.contains("unchecked"));
        }
    }

    #[test]
    fn line_names_fold() {
        assert_eq!(find_line("Cu Ka1").unwrap().line, "Kα1");
        assert_eq!(find_line("cu_kα1").unwrap().element, "Cu");
        assert!(find_line("Xx Ka1").is_err());
    }

    #[test]
    fn within_each_element_k_lines_order_by_energy() {
        // Physics: Kβ1 > Kα1 > Kα2 and Kα1 > Lβ1 > Lα1 > Mα1 within one element.
        let l = lines().unwrap();
        let e = |el: &str, line: &str| {
            l.iter()
                .find(|r| r.element == el && r.line == line)
                .map(|r| r.energy_kev)
        };
        for el in ["Fe", "Cu", "Mo", "Ag"] {
            assert!(e(el, "Kβ1") > e(el, "Kα1") && e(el, "Kα1") > e(el, "Kα2"));
            assert!(e(el, "Lβ1") > e(el, "Lα1"));
        }
        for el in ["W", "Au", "Pb"] {
            assert!(e(el, "Lβ1") > e(el, "Lα1") && e(el, "Lα1") > e(el, "Mα1"));
        }
        // Moseley's law: Kα1 energy rises monotonically with Z.
        let mut ka: Vec<(u32, f64)> = l
            .iter()
            .filter(|r| r.line == "Kα1")
            .map(|r| (r.z, r.energy_kev))
            .collect();
        ka.sort_by_key(|k| k.0);
        assert!(ka.windows(2).all(|w| w[1].1 > w[0].1));
    }
}
