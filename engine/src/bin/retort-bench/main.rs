//! `retort-bench`: the performance harness (benchmarks, not timed tests: nothing here
//! fails on a slow figure). Build and run:
//!
//!     cargo build --release -p engine --bins
//!     target/release/retort-bench [--smoke] [--json FILE] [--only LIST] [--work DIR]
//!
//! Workloads (`--only` takes a comma list of these names):
//! `import` (delimited text and JCAMP-DX, MB/s/core), `filters` (Savitzky–Golay,
//! AsLS, Shirley per 2,000-point spectrum), `fit` (three Voigt peaks + linear
//! background: spectra/s/core, iterations, accuracy against the generated truth),
//! `particles` (4096×4096 16-bit), `cold` (the whole recipe over 2,000 spectra,
//! `--no-cache`, `--jobs 1` and `--jobs 2`, the real binary), `incremental` (1,000
//! files: report rendering, no-op rerun, one file changed, that chain alone),
//! `memory` (peak RSS of the 10,000-spectrum run, `--memory-counts` for others;
//! a run is skipped, and says so, when the disk lacks room for its throwaway cache), `engine` (re-plan and per-node
//! overhead). `--smoke` runs every workload at a tiny size in seconds.
//!
//! Side-by-side helpers for `bench/side_by_side.py`:
//! `--write-data DIR --count N` writes N generated spectra (`DIR/spectra/*.csv`) and
//! `DIR/truth.json`; `--side DIR --count N` reads those files, times the Rust kernels on
//! them and prints one JSON object on stdout.

mod engine_overhead;
mod gen;
mod kernels;
mod runs;
mod table;

use std::path::PathBuf;
use table::Table;

pub fn load_average() -> String {
    std::fs::read_to_string("/proc/loadavg")
        .map(|s| s.split_whitespace().take(3).collect::<Vec<_>>().join(" "))
        .unwrap_or_else(|_| "unknown".into())
}

fn memory_total_mb() -> Option<f64> {
    let s = std::fs::read_to_string("/proc/meminfo").ok()?;
    let kb: f64 = s
        .lines()
        .find(|l| l.starts_with("MemTotal:"))?
        .split_whitespace()
        .nth(1)?
        .parse()
        .ok()?;
    Some(kb / 1024.0)
}

fn cpu_model() -> String {
    std::fs::read_to_string("/proc/cpuinfo")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("model name"))
                .and_then(|l| l.split_once(':'))
                .map(|(_, v)| v.trim().to_string())
        })
        .unwrap_or_else(|| "unknown".into())
}

struct Args {
    smoke: bool,
    json: Option<PathBuf>,
    only: Option<Vec<String>>,
    work: Option<PathBuf>,
    write_data: Option<PathBuf>,
    side: Option<PathBuf>,
    count: Option<usize>,
    memory_counts: Vec<usize>,
}

fn args() -> Args {
    let mut a = Args {
        smoke: false,
        json: None,
        only: None,
        work: None,
        write_data: None,
        side: None,
        count: None,
        memory_counts: vec![10_000],
    };
    let mut it = std::env::args().skip(1);
    while let Some(s) = it.next() {
        let mut value = |name: &str| {
            it.next()
                .unwrap_or_else(|| usage(&format!("{name} needs a value")))
        };
        match s.as_str() {
            "--smoke" => a.smoke = true,
            "--json" => a.json = Some(value("--json").into()),
            "--only" => a.only = Some(value("--only").split(',').map(str::to_string).collect()),
            "--work" => a.work = Some(value("--work").into()),
            "--write-data" => a.write_data = Some(value("--write-data").into()),
            "--side" => a.side = Some(value("--side").into()),
            "--count" => {
                a.count = Some(
                    value("--count")
                        .parse()
                        .unwrap_or_else(|_| usage("--count takes a whole number")),
                )
            }
            "--memory-counts" => {
                a.memory_counts = value("--memory-counts")
                    .split(',')
                    .map(|v| {
                        v.parse()
                            .unwrap_or_else(|_| usage("--memory-counts takes whole numbers"))
                    })
                    .collect()
            }
            "-h" | "--help" => usage(""),
            other => usage(&format!("unknown argument {other}")),
        }
    }
    a
}

fn usage(msg: &str) -> ! {
    if !msg.is_empty() {
        eprintln!("error: {msg}");
    }
    eprintln!("usage: retort-bench [--smoke] [--json FILE] [--only import,filters,fit,particles,cold,incremental,memory,engine] [--work DIR] [--memory-counts 10000]\n       retort-bench --write-data DIR --count N\n       retort-bench --side DIR --count N");
    std::process::exit(if msg.is_empty() { 0 } else { 2 })
}

/// `--side`: the Rust kernels on the files of a `--write-data` folder, as JSON.
fn side(dir: &std::path::Path, count: usize) {
    let o = stages::import::delimited::Options::default();
    let mut spectra = Vec::with_capacity(count);
    let mut bytes = 0usize;
    let mut texts = Vec::with_capacity(count);
    for i in 0..count {
        let p = dir.join(format!("spectra/s{i:05}.csv"));
        let b = std::fs::read(&p).unwrap_or_else(|e| panic!("{}: {e}", p.display()));
        bytes += b.len();
        texts.push(b);
    }
    let (parsed, tm) = kernels::time(|| {
        texts
            .iter()
            .map(|b| stages::import::delimited::parse("side.csv", b, &o))
            .collect::<Vec<_>>()
    });
    for (i, s) in parsed.into_iter().enumerate() {
        let s = s.unwrap_or_else(|e| panic!("spectrum {i}: {e}"));
        // The truth is regenerated from the seed; the file must hold the same numbers.
        let mut g = gen::spectrum(i as u64 + 1);
        assert_eq!(s.y, g.y, "spectrum {i} differs from its generator");
        g.x = s.x;
        g.y = s.y;
        spectra.push(g);
    }
    let filters = kernels::filters(&spectra, 0.5);
    let f = kernels::fits(&spectra);
    let mut doc = serde_json::json!({
        "count": count,
        "import_mb_per_s": bytes as f64 / 1e6 / tm.per_core(),
        "fit_per_s": f.per_second,
        "fit_mean_iterations": f.mean_iterations,
        "fit_failures": f.failures,
        "fit_rms_rel_error": { "centre": f.rms[0], "area": f.rms[1], "fwhm": f.rms[2] },
    });
    for (name, us, note) in filters {
        doc[format!("{name}_us")] = serde_json::json!(us);
        doc[format!("{name}_note")] = serde_json::json!(note);
    }
    println!("{doc}");
}

fn main() {
    let a = args();
    if let Some(dir) = &a.write_data {
        let n = a.count.unwrap_or(200);
        gen::write_folder(dir, n).unwrap_or_else(|e| panic!("{}: {e}", dir.display()));
        println!("wrote {n} spectra and truth.json to {}", dir.display());
        return;
    }
    if let Some(dir) = &a.side {
        side(dir, a.count.unwrap_or(200));
        return;
    }
    let cores = std::thread::available_parallelism()
        .map(|n| n.get())
        .unwrap_or(1);
    let started = engine::timefmt::now_rfc3339();
    let load_before = load_average();
    println!(
        "retort-bench {} ({} cores, {}, {:.0} MB memory{}), {started}, load average {load_before}",
        engine::VERSION,
        cores,
        cpu_model(),
        memory_total_mb().unwrap_or(0.0),
        if a.smoke { ", smoke mode" } else { "" }
    );
    let want = |w: &str| a.only.as_ref().is_none_or(|o| o.iter().any(|x| x == w));
    let _keep;
    let work = match &a.work {
        Some(w) => {
            std::fs::create_dir_all(w).unwrap_or_else(|e| panic!("{e}"));
            w.clone()
        }
        None => {
            // Beside the binary (target/release/), not in /tmp: on the development
            // machines creating files in a fresh /tmp folder cost ~0.3-0.7 ms each
            // (ext4 inode tables initialised on first use) against ~35 µs elsewhere
            // on the same disk, which swamped every whole-run figure.
            let near = std::env::current_exe()
                .ok()
                .and_then(|p| p.parent().map(|d| d.to_path_buf()))
                .unwrap_or_else(std::env::temp_dir);
            let t = tempfile::Builder::new()
                .prefix("retort-bench-")
                .tempdir_in(&near)
                .unwrap_or_else(|e| panic!("{}: {e}", near.display()));
            let p = t.path().to_path_buf();
            _keep = t;
            p
        }
    };
    let s = a.smoke;
    let min_seconds = if s { 0.02 } else { 1.0 };
    let mut t = Table::default();
    let spectra: Vec<gen::Generated> = (0..if s { 4 } else { 200 })
        .map(|i| gen::spectrum(i + 1))
        .collect();
    if want("import") {
        kernels::import(&mut t, &spectra, min_seconds);
    }
    if want("filters") {
        kernels::filter_rows(&mut t, &spectra, min_seconds);
    }
    if want("fit") {
        kernels::fit_rows(&mut t, &spectra);
    }
    if want("particles") {
        kernels::particles(&mut t, if s { 256 } else { 4096 });
    }
    if want("cold") {
        runs::cold(
            &mut t,
            &work,
            if s { 8 } else { 2000 },
            if s { 1 } else { 2 },
        );
    }
    if want("incremental") {
        runs::incremental(&mut t, &work, if s { 8 } else { 1000 });
    }
    if want("memory") {
        let counts = if s { vec![16] } else { a.memory_counts.clone() };
        for n in counts {
            let goal = (n >= 10_000 || s).then_some(("<", 500.0));
            runs::memory(&mut t, &work, n, goal);
        }
    }
    if want("engine") {
        let files = if s { 20 } else { 1000 };
        let best = engine_overhead::replan(files);
        t.row(
            "engine.replan",
            &format!("no-op re-plan, {files} files"),
            best,
            "s",
            None,
            "in process: recipe, plan, graph with the stat index (no file hashed), cache lookups",
        );
        if s {
            engine_overhead::overhead(10, 5);
        } else {
            engine_overhead::overhead(100, 100);
        }
    }
    t.print();
    let load_after = load_average();
    println!("load average before {load_before}, after {load_after}");
    if let Some(p) = &a.json {
        let doc = serde_json::json!({
            "harness": "retort-bench",
            "version": engine::VERSION,
            "started": started,
            "finished": engine::timefmt::now_rfc3339(),
            "smoke": s,
            "machine": {
                "cores": cores,
                "cpu": cpu_model(),
                "memory_mb": memory_total_mb(),
                "load_average_before": load_before,
                "load_average_after": load_after,
            },
            "rows": t.rows,
        });
        std::fs::write(p, serde_json::to_vec_pretty(&doc).unwrap_or_default())
            .unwrap_or_else(|e| panic!("{}: {e}", p.display()));
        println!("wrote {}", p.display());
    }
}
