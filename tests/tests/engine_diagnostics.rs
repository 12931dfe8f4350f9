//! Exact diagnostics for the bad-recipe corpus: `tests/cases/engine/bad/<name>.yaml`
//! and the expected stderr of `retort check` in `<name>.expected`. One harness for
//! all; `RETORT_BLESS=1 cargo test -p tests --test engine_diagnostics` rewrites the
//! expected files. Each bad recipe must also exit 2 from `run` and write nothing.

mod engine_common;
use engine_common::*;

#[test]
fn bad_recipes_give_the_expected_diagnostics_and_write_nothing() {
    let n = check_bad_recipe_corpus(&cases().join("bad"));
    assert!(n >= 8, "corpus too small: {n}");
}

#[test]
fn a_first_line_shaped_error_points_at_line_and_column() {
    // Each of the named failures: cycle, unknown stage (with a hint), bad
    // option type, missing file, empty glob.
    for (name, needle) in [
        (
            "cycle",
            "cycle.yaml:5:44: error: steps form a cycle: a -> b -> c -> a",
        ),
        ("unknown_stage", "did you mean `smooth.moving_average`?"),
        ("bad_option_type", "bad_option_type.yaml:10:15: error:"),
        ("missing_file", "missing_file.yaml:3:14: error:"),
        (
            "empty_glob",
            "empty_glob.yaml:3:12: error: sample set `spectra`: no files match `data/*.jdx`",
        ),
    ] {
        let t = fixture("bad");
        let r = run(t.path(), &["run", &format!("{name}.yaml")]);
        assert_eq!(r.code, 2);
        assert!(r.stderr.contains(needle), "{name}: expected {needle:?}");
    }
}

#[test]
fn set_values_are_type_checked_against_the_parameter() {
    let t = fixture("basic");
    let r = run(t.path(), &["check", "recipe.yaml", "--set", "window=wide"]);
    assert_eq!(r.code, 2);
    assert!(r
        .stderr
        .contains("command line: error: --set window=wide: parameter `window` is an integer"));
    let r = run(t.path(), &["check", "recipe.yaml", "--set", "widow=7"]);
    assert_eq!(r.code, 2);
    assert!(r.stderr.contains("did you mean `window`?"));
    let r = run(t.path(), &["check", "recipe.yaml", "--set", "window=7"]);
    assert_eq!(r.code, 0);
}
