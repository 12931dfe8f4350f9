//! The built-in table of reference energies and chemical shifts
//! (`stages/data/reference_energies.csv`): excitation sources for photoelectron
//! spectroscopy, binding-energy references (ISO 15472:2010, adventitious carbon) and
//! NMR shift references (TMS; residual solvent signals from Gottlieb, Kotlyar and
//! Nudelman, J. Org. Chem. 1997, 62, 7512). Every row names its source.

use std::sync::OnceLock;

/// The CSV text, embedded at build time.
pub const TABLE_CSV: &str = include_str!("../data/reference_energies.csv");

/// One row of the reference table.
#[derive(Clone, Debug, PartialEq)]
pub struct ReferenceValue {
    /// Stable snake_case name used in recipes (`adventitious_c1s`, `al_ka_mono`).
    pub name: String,
    /// `excitation`, `xps_reference`, `nmr_1h` or `nmr_13c`.
    pub kind: String,
    pub value: f64,
    pub unit: String,
    pub source: String,
}

fn parse_table(text: &str) -> Result<Vec<ReferenceValue>, String> {
    // Lines starting with '#' are header comments recording what was checked.
    let mut rdr = csv::ReaderBuilder::new()
        .comment(Some(b'#'))
        .from_reader(text.as_bytes());
    let mut out = Vec::new();
    for rec in rdr.records() {
        let rec = rec.map_err(|e| format!("reference_energies.csv: {e}"))?;
        let line = rec.position().map_or(0, |p| p.line());
        if rec.len() != 5 {
            return Err(format!(
                "reference_energies.csv:{line}: expected 5 fields, found {}",
                rec.len()
            ));
        }
        let value: f64 = rec[2].trim().parse().map_err(|_| {
            format!(
                "reference_energies.csv:{line}: value '{}' is not a number",
                &rec[2]
            )
        })?;
        out.push(ReferenceValue {
            name: rec[0].trim().to_string(),
            kind: rec[1].trim().to_string(),
            value,
            unit: rec[3].trim().to_string(),
            source: rec[4].trim().to_string(),
        });
    }
    Ok(out)
}

/// Every row of the table (parsed once). The table is tested at build time, so a
/// parse failure is a programming error; it is reported as an empty table plus the
/// message from [`table_error`] rather than a panic.
pub fn table() -> &'static [ReferenceValue] {
    match parsed() {
        Ok(v) => v,
        Err(_) => &[],
    }
}

fn parsed() -> &'static Result<Vec<ReferenceValue>, String> {
    static TABLE: OnceLock<Result<Vec<ReferenceValue>, String>> = OnceLock::new();
    TABLE.get_or_init(|| parse_table(TABLE_CSV))
}

/// The parse error of the embedded table, if any (tests assert there is none).
pub fn table_error() -> Option<&'static str> {
    parsed().as_ref().err().map(String::as_str)
}

/// The row with this name (case-insensitive).
pub fn lookup(name: &str) -> Option<&'static ReferenceValue> {
    table()
        .iter()
        .find(|r| r.name.eq_ignore_ascii_case(name.trim()))
}

/// The row with this name and one of the given kinds, or an error listing the names
/// of those kinds.
pub fn lookup_kind(name: &str, kinds: &[&str]) -> Result<&'static ReferenceValue, String> {
    match lookup(name) {
        Some(r) if kinds.contains(&r.kind.as_str()) => Ok(r),
        _ => {
            let names: Vec<&str> = table()
                .iter()
                .filter(|r| kinds.contains(&r.kind.as_str()))
                .map(|r| r.name.as_str())
                .collect();
            Err(format!(
                "'{name}' is not in the reference table; known names: {}",
                names.join(", ")
            ))
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn table_parses_and_every_row_has_a_source() {
        assert_eq!(table_error(), None);
        assert!(table().len() >= 25);
        for r in table() {
            assert!(!r.source.is_empty(), "{} has no source", r.name);
            assert!(r.value.is_finite());
            assert!(
                ["excitation", "xps_reference", "nmr_1h", "nmr_13c"].contains(&r.kind.as_str()),
                "{}: unknown kind {}",
                r.name,
                r.kind
            );
        }
        let mut names: Vec<_> = table().iter().map(|r| r.name.clone()).collect();
        names.sort();
        names.dedup();
        assert_eq!(names.len(), table().len(), "duplicate names");
    }

    #[test]
    fn spot_checks_against_stated_sources() {
        // Gottlieb, Kotlyar & Nudelman 1997, Table 1, row "solvent residual peak":
        // CHCl3 in CDCl3 at 7.26 ppm (checked against a reproduction of Table 1).
        assert_eq!(lookup("chcl3_in_cdcl3_1h").map(|r| r.value), Some(7.26));
        // Same source, Table 2: CDCl3 13C at 77.16 ppm (from memory; Table 2 not consulted).
        assert_eq!(lookup("cdcl3_13c").map(|r| r.value), Some(77.16));
        // ISO 15472: Au 4f7/2 83.96 eV (monochromated Al Kα), as quoted with Seah,
        // Gilmore & Beamson, Surf. Interface Anal. 26 (1998) 642.
        assert_eq!(lookup("au_4f7_2").map(|r| r.value), Some(83.96));
        // Common practice: adventitious C 1s at 284.8 eV; Al Kα 1486.6 eV.
        assert_eq!(lookup("adventitious_c1s").map(|r| r.value), Some(284.8));
        assert_eq!(lookup("AL_KA").map(|r| r.value), Some(1486.6));
        assert!(lookup_kind("adventitious_c1s", &["excitation"]).is_err());
    }
}
