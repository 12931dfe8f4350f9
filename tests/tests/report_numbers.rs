//! Number formatting and curve decimation used by the report.
//!
//! Rounding follows JCGM 100:2008 (GUM) 7.2.6: the uncertainty is given to at most
//! two significant digits and the value is rounded to the same decimal place. The
//! GUM allows rounding the uncertainty up instead of to the nearest digit (its
//! example, as remembered: 10.47 mΩ might be rounded up to 11 mΩ); retort rounds to
//! the nearest digit and says so in `engine::report::number`.
//! Notation (our choice, stated in the module): fixed while values stay within
//! 10⁻⁴..10⁶ and at most five decimals, otherwise one shared power of ten.

use engine::report::lttb::{decimate_runs, lttb};
use engine::report::number::{format_measurement, format_plain, format_significant};
use engine::report::{markdown_escape, sanitize};

#[test]
fn value_and_uncertainty_rounded_after_gum_7_2_6() {
    let cases: &[(f64, Option<f64>, &str)] = &[
        // The worked case.
        (1.23456, Some(0.012345), "1.235 ± 0.012"),
        // Large value, uncertainty in the hundreds: value rounded to the tens.
        (123456.0, Some(789.0), "123460 ± 790"),
        // GUM 7.2.2: m_S = 100.021 47 g with u_c = 0.35 mg.
        (100.02147, Some(0.00035), "100.02147 ± 0.00035"),
        // Rounded to the nearest digit, not up (see the module comment).
        (5.1234, Some(0.01047), "5.123 ± 0.010"),
        // Rounding that carries into a third digit keeps two: 0.0996 -> 0.10.
        (2.34567, Some(0.0996), "2.35 ± 0.10"),
        // Negative values, and no negative zero after rounding.
        (-0.51234, Some(0.0131), "-0.512 ± 0.013"),
        (-0.0001, Some(0.01), "0.000 ± 0.010"),
        (0.0, Some(0.0123), "0.000 ± 0.012"),
        // Uncertainty larger than the value.
        (0.4, Some(12.3), "0 ± 12"),
        // Just under the scientific threshold, uncertainty in the thousands.
        (987654.3, Some(12345.0), "988000 ± 12000"),
        // Very large: CODATA-style magnitude, shared power of ten.
        (6.02214076e23, Some(1.2e19), "(6.02214 ± 0.00012) × 10²³"),
        // Very small.
        (1.23456e-8, Some(1.2345e-10), "(1.235 ± 0.012) × 10⁻⁸"),
        // Small uncertainty on a moderate value: fixed up to eight decimals...
        (4.12345678, Some(0.0000012), "4.1234568 ± 0.0000012"),
        // ...and never "× 10⁰".
        (
            4.12345678912,
            Some(1.2e-10),
            "4.12345678912 ± 0.00000000012",
        ),
        (0.00012345, Some(0.0000012), "(1.235 ± 0.012) × 10⁻⁴"),
        // No usable uncertainty: six significant digits, zeros trimmed.
        (1.23456789, None, "1.23457"),
        (1.23456789, Some(0.0), "1.23457"),
        (1.5, Some(f64::NAN), "1.5"),
        (-42.0, None, "-42"),
        (999999.7, None, "1 × 10⁶"),
        (0.000012345678, None, "1.23457 × 10⁻⁵"),
        (0.0, None, "0"),
        (f64::NAN, Some(1.0), ""),
    ];
    for (v, u, want) in cases {
        assert_eq!(&format_measurement(*v, *u), want, "{v} ± {u:?}");
    }
    assert_eq!(format_plain(284.8), "284.8");
    assert_eq!(format_significant(1.062345, 4), "1.062");
    assert_eq!(format_significant(312.4567, 4), "312.5");
    assert_eq!(format_significant(0.998712, 5), "0.99871");
}

#[test]
fn lttb_small_example_worked_by_hand() {
    // Six points, four kept: buckets {1,2} and {3,4}. Bucket 1: triangle areas with
    // (0,0) and the mean (3.5, 2.5) of bucket 2 are 1 (i=1) and 5 (i=2) -> 2.
    // Bucket 2: areas with (2,0) and the last point (5,0) are 15 (i=3), 0 (i=4) -> 3.
    let x = [0.0, 1.0, 2.0, 3.0, 4.0, 5.0];
    let y = [0.0, 1.0, 0.0, 5.0, 0.0, 0.0];
    assert_eq!(lttb(&x, &y, 4), vec![0, 2, 3, 5]);
}

#[test]
fn lttb_keeps_ends_and_the_extreme_of_a_spike() {
    let n = 10_000;
    let x: Vec<f64> = (0..n).map(|i| i as f64 * 0.01).collect();
    let mut y: Vec<f64> = (0..n).map(|i| (i as f64 * 0.05).sin()).collect();
    y[5123] = 100.0;
    y[7777] = -80.0;
    let kept = lttb(&x, &y, 500);
    assert_eq!(kept.len(), 500);
    assert_eq!(kept[0], 0);
    assert_eq!(*kept.last().unwrap(), n - 1);
    assert!(kept.contains(&5123), "the spike maximum is kept");
    assert!(kept.contains(&7777), "the dip minimum is kept");
    assert!(kept.windows(2).all(|w| w[0] < w[1]));
    // Descending x (binding energy) works the same.
    let xr: Vec<f64> = x.iter().rev().copied().collect();
    let yr: Vec<f64> = y.iter().rev().copied().collect();
    assert!(lttb(&xr, &yr, 500).contains(&(n - 1 - 5123)));
    // Nothing to drop.
    assert_eq!(lttb(&x[..10], &y[..10], 500), (0..10).collect::<Vec<_>>());
}

#[test]
fn decimation_keeps_gaps_of_curves() {
    // A guide line defined on two stretches only (NaN elsewhere) stays two runs.
    let x: Vec<f64> = (0..3000).map(f64::from).collect();
    let y: Vec<f64> = x
        .iter()
        .map(|v| {
            if (100.0..1000.0).contains(v) || *v >= 2000.0 {
                *v
            } else {
                f64::NAN
            }
        })
        .collect();
    let runs = decimate_runs(&x, &y, 300);
    assert_eq!(runs.len(), 2);
    assert_eq!(runs[0].first().unwrap().0, 100.0);
    assert_eq!(runs[0].last().unwrap().0, 999.0);
    assert_eq!(runs[1].last().unwrap().0, 2999.0);
    assert!(runs.iter().map(Vec::len).sum::<usize>() <= 302);
}

#[test]
fn file_names_and_markdown_text_are_safe() {
    assert_eq!(
        sanitize("<script>alert(1)</script>"),
        "script_alert_1_script"
    );
    assert_eq!(sanitize("../../etc/passwd"), "etc_passwd");
    assert_eq!(sanitize("film A (annealed).csv"), "film_A_annealed_csv");
    assert_eq!(sanitize("run.2"), "run.2");
    assert_eq!(sanitize(""), "x");
    assert_eq!(
        markdown_escape("a|b <i>*x*</i>"),
        "a\\|b &lt;i&gt;\\*x\\*&lt;/i&gt;"
    );
}
