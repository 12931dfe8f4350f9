//! Tidy checks for the reliability rules that a grep can enforce:
//! - every `unwrap()` / `expect(` outside test code in `engine/src` and `stages/src`
//!   carries a `// cannot fail:` comment on its line or the line above;
//! - no stage runs programs or reaches the network (`std::process`, `std::net`,
//!   `Command::new` never appear in `stages/src`).

use std::path::{Path, PathBuf};

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
        .parent()
        .map(Path::to_path_buf)
        .unwrap_or_default()
}

fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for e in std::fs::read_dir(dir).unwrap().flatten() {
        let p = e.path();
        if p.is_dir() {
            rust_files(&p, out);
        } else if p.extension().is_some_and(|x| x == "rs") {
            out.push(p);
        }
    }
}

/// Lines of non-test code: everything before the first `#[cfg(test)]` (test modules
/// sit at the end of a file by convention), skipping comment lines.
fn code_lines(text: &str) -> Vec<(usize, &str, &str)> {
    let lines: Vec<&str> = text.lines().collect();
    let mut out = Vec::new();
    for (i, line) in lines.iter().enumerate() {
        if line.trim_start().starts_with("#[cfg(test)]") {
            break;
        }
        let prev = if i > 0 { lines[i - 1] } else { "" };
        out.push((i + 1, *line, prev));
    }
    out
}

/// (line, text) of every non-test unwrap/expect without a `// cannot fail:` comment.
fn unexplained(text: &str) -> Vec<(usize, String)> {
    let mut out = Vec::new();
    for (n, line, prev) in code_lines(text) {
        let t = line.trim_start();
        if t.starts_with("//") {
            continue;
        }
        if (line.contains("unwrap()") || line.contains("expect("))
            && !line.contains("// cannot fail:")
            && !prev.trim_start().starts_with("// cannot fail:")
        {
            out.push((n, t.to_string()));
        }
    }
    out
}

#[test]
fn the_unwrap_rule_sees_what_it_should() {
    let src = "fn a() {\n    x.unwrap();\n    // cannot fail: checked above\n    y.expect(\"z\");\n    w.unwrap(); // cannot fail: non-empty\n}\n#[cfg(test)]\nmod tests { fn b() { q.unwrap(); } }\n";
    assert_eq!(unexplained(src), vec![(2, "x.unwrap();".to_string())]);
}

#[test]
fn every_non_test_unwrap_or_expect_says_why_it_cannot_fail() {
    let mut files = Vec::new();
    rust_files(&root().join("engine/src"), &mut files);
    rust_files(&root().join("stages/src"), &mut files);
    files.sort();
    assert!(files.len() > 20, "source files not found");
    let mut bad = Vec::new();
    for f in &files {
        let text = std::fs::read_to_string(f).unwrap();
        for (n, t) in unexplained(&text) {
            bad.push(format!(
                "{}:{n}: {t}",
                f.strip_prefix(root()).unwrap_or(f).display()
            ));
        }
    }
    assert!(
        bad.is_empty(),
        "{} unwrap/expect without a `// cannot fail:` comment:\n{}",
        bad.len(),
        bad.join("\n")
    );
}

#[test]
fn no_stage_runs_programs_or_reaches_the_network() {
    let mut files = Vec::new();
    rust_files(&root().join("stages/src"), &mut files);
    let mut bad = Vec::new();
    for f in &files {
        let text = std::fs::read_to_string(f).unwrap();
        for (n, line) in text.lines().enumerate() {
            for needle in [
                "std::process",
                "std::net",
                "Command::new",
                "TcpStream",
                "UdpSocket",
                "std::fs::",
                "File::open",
            ] {
                if line.contains(needle) {
                    bad.push(format!("{}:{}: {needle}", f.display(), n + 1));
                }
            }
        }
    }
    assert!(bad.is_empty(), "stages must stay pure:\n{}", bad.join("\n"));
}
