//! Numbers as the report prints them.
//!
//! A value with a standard uncertainty is written after JCGM 100:2008 (GUM), 7.2.6:
//! the uncertainty is rounded to two significant digits and the value to the same
//! decimal place, so `1.23456 ± 0.012345` reads `1.235 ± 0.012` and
//! `123456 ± 789` reads `123460 ± 790`.
//!
//! Fixed notation is used while the larger of the rounded value and uncertainty
//! lies between 10⁻³ and 10⁶ in magnitude and at most eight decimals are needed;
//! otherwise both are written with one shared power of ten,
//! `(1.235 ± 0.012) × 10⁻⁸`, so the two digits of the uncertainty always show.
//! A value without an uncertainty (None, zero or not finite) is written with six
//! significant digits and trailing zeros dropped. The minus sign is ASCII so the
//! text pastes into spreadsheets. CSV files never use this module: they keep
//! every digit.

/// Smallest magnitude written in fixed notation.
const FIXED_MIN: f64 = 1e-3;
/// Most decimals written in fixed notation.
const MAX_DECIMALS: i32 = 8;
/// Magnitude from which scientific notation is used.
const FIXED_MAX: f64 = 1e6;
/// Significant digits of a value that has no uncertainty.
const PLAIN_DIGITS: i32 = 6;

/// `value ± uncertainty` rounded after GUM 7.2.6 (see the module comment).
pub fn format_measurement(value: f64, uncertainty: Option<f64>) -> String {
    if !value.is_finite() {
        return String::new();
    }
    let u = match uncertainty {
        Some(u) if u.is_finite() && u > 0.0 => u,
        _ => return format_plain(value),
    };
    // Decimal exponent of the uncertainty's last kept (second significant) digit.
    let mut last = u.log10().floor() as i32 - 1;
    let mut u_r = round_to(u, last);
    if u_r >= 100.0 * pow10(last) {
        // 0.0996 rounds to 0.100: keep two digits, 0.10.
        last += 1;
        u_r = round_to(u, last);
    }
    let v_r = round_to(value, last);
    let biggest = v_r.abs().max(u_r);
    let decimals = -last;
    let e = biggest.log10().floor() as i32;
    if (FIXED_MIN..FIXED_MAX).contains(&biggest) && (decimals <= MAX_DECIMALS || e == 0) {
        let d = decimals.max(0) as usize;
        format!("{} ± {}", fixed(v_r, d), fixed(u_r, d))
    } else {
        let d = (e - last).max(0) as usize;
        let scale = pow10(e);
        format!(
            "({} ± {}) × 10{}",
            fixed(v_r / scale, d),
            fixed(u_r / scale, d),
            superscript(e)
        )
    }
}

/// A value without an uncertainty: six significant digits, trailing zeros dropped.
pub fn format_plain(value: f64) -> String {
    if !value.is_finite() {
        return String::new();
    }
    if value == 0.0 {
        return "0".to_string();
    }
    let e = value.abs().log10().floor() as i32;
    let last = e - (PLAIN_DIGITS - 1);
    let v_r = round_to(value, last);
    // Rounding may carry into a new digit (999999.7 -> 1000000).
    let e = if v_r == 0.0 {
        e
    } else {
        v_r.abs().log10().floor() as i32
    };
    if v_r.abs() >= FIXED_MIN && v_r.abs() < FIXED_MAX {
        let d = (-last).max(0) as usize;
        trim_zeros(fixed(v_r, d))
    } else {
        let scale = pow10(e);
        let d = (PLAIN_DIGITS - 1) as usize;
        format!(
            "{} × 10{}",
            trim_zeros(fixed(v_r / scale, d)),
            superscript(e)
        )
    }
}

/// A statistic (χ², R²) with a given number of significant digits.
pub fn format_significant(value: f64, digits: i32) -> String {
    if !value.is_finite() {
        return String::new();
    }
    if value == 0.0 {
        return "0".to_string();
    }
    let e = value.abs().log10().floor() as i32;
    if !(-4..6).contains(&e) {
        let scale = pow10(e);
        return format!(
            "{} × 10{}",
            fixed(value / scale, (digits - 1).max(0) as usize),
            superscript(e)
        );
    }
    let d = (digits - 1 - e).max(0) as usize;
    fixed(round_to(value, e - digits + 1), d)
}

/// Rounds to a multiple of 10^`exp` (half away from zero).
fn round_to(v: f64, exp: i32) -> f64 {
    if exp >= 0 {
        let q = pow10(exp);
        (v / q).round() * q
    } else {
        // Dividing by 10^-exp keeps more accuracy than multiplying by 10^exp.
        let q = pow10(-exp);
        (v * q).round() / q
    }
}

fn pow10(e: i32) -> f64 {
    10f64.powi(e)
}

/// Fixed notation with `d` decimals and no negative zero.
fn fixed(v: f64, d: usize) -> String {
    let s = format!("{v:.d$}");
    if s.starts_with('-') && s[1..].chars().all(|c| c == '0' || c == '.') {
        s[1..].to_string()
    } else {
        s
    }
}

fn trim_zeros(s: String) -> String {
    if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    }
}

fn superscript(e: i32) -> String {
    e.to_string()
        .chars()
        .map(|c| match c {
            '-' => '⁻',
            '0' => '⁰',
            '1' => '¹',
            '2' => '²',
            '3' => '³',
            '4' => '⁴',
            '5' => '⁵',
            '6' => '⁶',
            '7' => '⁷',
            '8' => '⁸',
            '9' => '⁹',
            other => other,
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn worked_examples() {
        // JCGM 100:2008, 7.2.2: "m_S = 100,021 47 g with u_c = 0,35 mg" — two
        // significant digits of the uncertainty, the value to the same place.
        assert_eq!(
            format_measurement(100.021_47, Some(0.000_35)),
            "100.02147 ± 0.00035"
        );
        assert_eq!(format_measurement(1.23456, Some(0.012345)), "1.235 ± 0.012");
    }
}
