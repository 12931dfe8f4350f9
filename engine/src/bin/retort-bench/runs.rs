//! Whole-recipe workloads: the real `retort` binary (the sibling of this executable)
//! run on generated folders, timed from outside, its peak resident memory taken by
//! `/usr/bin/time -f %M` (the child's maximum RSS from wait4) when present, else by
//! polling VmHWM in `/proc/<pid>/status`.

use crate::gen;
use crate::table::Table;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant, SystemTime};

/// The recipe every whole-run workload runs: import, a display smoothing, the
/// three-Voigt fit of the unsmoothed data and a results table over all items.
pub fn recipe_text() -> String {
    let mut peaks = String::new();
    for (k, (c, a, s, g)) in gen::STARTS.iter().enumerate() {
        peaks.push_str(&format!(
            "        p{}: {{ center: {c}, area: {a}, sigma: {s}, gamma: {g} }}\n",
            k + 1
        ));
    }
    format!(
        "id: bench\ntitle: Benchmark recipe over generated spectra\nsamples:\n  spectra: data/*.csv\nsteps:\n  raw: {{ stage: import.delimited, from: spectra }}\n  smooth: {{ stage: smooth.savitzky_golay, from: raw, options: {{ window: 11, order: 3 }} }}\n  envelope:\n    stage: fit.peaks\n    from: raw\n    options:\n      shape: voigt\n      background: linear\n      background_parameters: {{ c0: 0, c1: 0 }}\n      weights: none\n      peaks:\n{peaks}  table: {{ stage: gather.table, from: envelope }}\n"
    )
}

/// Writes `count` spectra under `dir/data/` (mtimes an hour old, so the stat index
/// trusts them) and the recipe as `dir/recipe.yaml`.
pub fn dataset(dir: &Path, count: usize, first_seed: u64) -> PathBuf {
    let data = dir.join("data");
    std::fs::create_dir_all(&data).unwrap_or_else(|e| panic!("{}: {e}", data.display()));
    let old = SystemTime::now() - Duration::from_secs(3600);
    for i in 0..count {
        write_spectrum(
            &data.join(format!("s{i:05}.csv")),
            first_seed + i as u64,
            Some(old),
        );
    }
    let recipe = dir.join("recipe.yaml");
    std::fs::write(&recipe, recipe_text()).unwrap_or_else(|e| panic!("{e}"));
    recipe
}

pub fn write_spectrum(path: &Path, seed: u64, mtime: Option<SystemTime>) {
    let g = gen::spectrum(seed);
    std::fs::write(path, gen::delimited_text(&g.x, &g.y))
        .unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    if let Some(t) = mtime {
        if let Ok(f) = std::fs::File::options().write(true).open(path) {
            let _ = f.set_modified(t);
        }
    }
}

/// One run of the binary.
pub struct RunFigures {
    pub wall: f64,
    /// Peak resident set, MB (None when it could not be measured).
    pub peak_mb: Option<f64>,
    pub exit: Option<i32>,
    /// `RETORT_TIMING` phases: (name, ms).
    pub phases: Vec<(String, f64)>,
}

impl RunFigures {
    pub fn phase(&self, name: &str) -> Option<f64> {
        self.phases.iter().find(|p| p.0 == name).map(|p| p.1)
    }
}

pub fn binary() -> PathBuf {
    let me = std::env::current_exe().unwrap_or_else(|e| panic!("{e}"));
    let bin = me.with_file_name(format!("retort{}", std::env::consts::EXE_SUFFIX));
    if !bin.exists() {
        panic!(
            "{} not found: build it first (cargo build --release -p engine --bins)",
            bin.display()
        );
    }
    bin
}

/// Runs `retort run RECIPE --quiet ARGS...` in the recipe's folder.
pub fn run(recipe: &Path, args: &[&str]) -> RunFigures {
    let gnu_time = Path::new("/usr/bin/time");
    let rss_file = recipe.with_file_name("maxrss.txt");
    let mut cmd = if gnu_time.exists() {
        let mut c = Command::new(gnu_time);
        c.arg("-f").arg("%M").arg("-o").arg(&rss_file).arg(binary());
        c
    } else {
        Command::new(binary())
    };
    cmd.arg("run")
        .arg(recipe)
        .arg("--quiet")
        .args(args)
        .env("RETORT_TIMING", "1")
        .stdout(Stdio::null())
        .stderr(Stdio::piped());
    let t0 = Instant::now();
    let mut child = cmd
        .spawn()
        .unwrap_or_else(|e| panic!("cannot start retort: {e}"));
    // Fallback: poll VmHWM of the child (the last reading before it exits).
    let mut hwm_kb: Option<f64> = None;
    let stderr = child.stderr.take();
    let reader = std::thread::spawn(move || {
        let mut s = String::new();
        if let Some(mut e) = stderr {
            let _ = std::io::Read::read_to_string(&mut e, &mut s);
        }
        s
    });
    let status = loop {
        if let Ok(Some(st)) = child.try_wait() {
            break Some(st);
        }
        if !gnu_time.exists() {
            if let Ok(s) = std::fs::read_to_string(format!("/proc/{}/status", child.id())) {
                if let Some(v) = s
                    .lines()
                    .find(|l| l.starts_with("VmHWM:"))
                    .and_then(|l| l.split_whitespace().nth(1))
                    .and_then(|v| v.parse::<f64>().ok())
                {
                    hwm_kb = Some(v);
                }
            }
        }
        std::thread::sleep(Duration::from_millis(5));
    };
    let wall = t0.elapsed().as_secs_f64();
    let err = reader.join().unwrap_or_default();
    if gnu_time.exists() {
        hwm_kb = std::fs::read_to_string(&rss_file)
            .ok()
            .and_then(|s| s.lines().last().and_then(|l| l.trim().parse().ok()));
    }
    let phases = err
        .lines()
        .filter_map(|l| l.strip_prefix("timing: "))
        .filter_map(|l| {
            let mut w = l.split_whitespace();
            Some((w.next()?.to_string(), w.next()?.parse().ok()?))
        })
        .collect();
    let exit = status.and_then(|s| s.code());
    if exit != Some(0) {
        eprintln!("retort exited with {exit:?}:\n{err}");
    }
    RunFigures {
        wall,
        peak_mb: hwm_kb.map(|k| k / 1024.0),
        exit,
        phases,
    }
}

/// Free space (MB) of the file system holding `dir`, from `df -Pk`.
pub fn free_mb(dir: &Path) -> Option<f64> {
    let out = Command::new("df").arg("-Pk").arg(dir).output().ok()?;
    let text = String::from_utf8_lossy(&out.stdout);
    let kb: f64 = text
        .lines()
        .nth(1)?
        .split_whitespace()
        .nth(3)?
        .parse()
        .ok()?;
    Some(kb / 1024.0)
}

/// Disk a run over `count` spectra needs for its inputs and (throwaway) cache: about
/// 0.3 MB a spectrum for this recipe (the fit artifact holds six 2,000-point curves).
fn disk_ok(t: &mut Table, work: &Path, workload: &str, metric: &str, count: usize) -> bool {
    let need = 0.3 * count as f64 + 200.0;
    match free_mb(work) {
        Some(free) if free < need => {
            t.row(
                workload,
                metric,
                f64::NAN,
                "",
                None,
                &format!("skipped: needs about {need:.0} MB of disk, {free:.0} MB free"),
            );
            false
        }
        _ => true,
    }
}

fn mb(r: &RunFigures) -> String {
    r.peak_mb
        .map(|m| format!("{m:.0} MB peak RSS"))
        .unwrap_or_else(|| "peak RSS unknown".into())
}

/// Cold runs at 1 and 2 threads (each `repeats` times, interleaved; best kept).
pub fn cold(t: &mut Table, work: &Path, count: usize, repeats: usize) {
    if !disk_ok(t, work, "recipe.cold", &format!("{count} spectra"), count) {
        return;
    }
    let dir = work.join(format!("cold{count}"));
    let recipe = dataset(&dir, count, 1);
    let mut best = [f64::INFINITY; 2];
    let mut peak = [0.0f64; 2];
    for _ in 0..repeats {
        for (k, jobs) in ["1", "2"].iter().enumerate() {
            let r = run(&recipe, &["--no-cache", "--jobs", jobs]);
            best[k] = best[k].min(r.wall);
            peak[k] = peak[k].max(r.peak_mb.unwrap_or(0.0));
        }
    }
    let load = crate::load_average();
    t.row(
        "recipe.cold",
        &format!("{count} spectra, --jobs 1"),
        best[0],
        "s",
        None,
        &format!("--no-cache, best of {repeats}; {:.0} MB peak RSS", peak[0]),
    );
    t.row(
        "recipe.cold",
        &format!("{count} spectra, --jobs 2"),
        best[1],
        "s",
        None,
        &format!("--no-cache, best of {repeats}; {:.0} MB peak RSS", peak[1]),
    );
    t.row(
        "recipe.cold",
        "speed-up 2 threads over 1",
        best[0] / best[1],
        "x",
        Some((">=", 1.8)),
        &format!("load average after: {load}"),
    );
    t.row(
        "memory",
        &format!("peak RSS, {count}-spectrum cold run"),
        peak[1],
        "MB",
        None,
        "--jobs 2, --no-cache",
    );
    let _ = std::fs::remove_dir_all(&dir);
}

/// Peak memory of one cold run over `count` spectra.
pub fn memory(t: &mut Table, work: &Path, count: usize, goal: Option<(&str, f64)>) {
    let metric = format!("peak RSS, {count}-spectrum cold run");
    if !disk_ok(t, work, "memory", &metric, count) {
        return;
    }
    let dir = work.join(format!("mem{count}"));
    let recipe = dataset(&dir, count, 1);
    let r = run(&recipe, &["--no-cache", "--jobs", "2"]);
    let phases: Vec<String> = r
        .phases
        .iter()
        .map(|(n, ms)| format!("{n} {:.1} s", ms / 1e3))
        .collect();
    let _ = std::fs::remove_dir_all(&dir);
    t.row(
        "memory",
        &metric,
        r.peak_mb.unwrap_or(f64::NAN),
        "MB",
        goal,
        &format!(
            "--jobs 2, --no-cache, wall {:.1} s, exit {:?}; {}",
            r.wall,
            r.exit,
            phases.join(", ")
        ),
    );
}

/// No-op rerun, one changed file, that file's chain alone; report rendering.
pub fn incremental(t: &mut Table, work: &Path, count: usize) {
    if !disk_ok(t, work, "recipe.noop", &format!("{count} files"), count) {
        return;
    }
    let dir = work.join(format!("inc{count}"));
    let recipe = dataset(&dir, count, 1);
    let first = run(&recipe, &["--jobs", "2"]);
    t.row(
        "report",
        &format!("render, {count} spectra"),
        first.phase("report").unwrap_or(f64::NAN) / 1e3,
        "s",
        None,
        &format!(
            "report phase of the first (cold, cached) run, wall {:.1} s, {}",
            first.wall,
            mb(&first)
        ),
    );
    let mut noop = f64::INFINITY;
    let mut noop_run = None;
    for _ in 0..3 {
        let r = run(&recipe, &["--jobs", "2"]);
        if r.wall < noop {
            noop = r.wall;
            noop_run = Some(r);
        }
    }
    let phases = noop_run
        .map(|r| {
            r.phases
                .iter()
                .map(|(n, ms)| format!("{n} {ms:.0} ms"))
                .collect::<Vec<_>>()
                .join(", ")
        })
        .unwrap_or_default();
    t.row(
        "recipe.noop",
        &format!("re-run, {count} files, nothing changed"),
        noop,
        "s",
        Some(("<", 0.2)),
        &format!("best of 3, whole process; {phases}"),
    );
    // The same, with the output folder written again from the cache.
    let rewrite = (0..3)
        .map(|_| run(&recipe, &["--jobs", "2", "--rewrite"]))
        .min_by(|a, b| a.wall.total_cmp(&b.wall));
    if let Some(r) = rewrite {
        t.row(
            "recipe.noop",
            &format!("re-run, {count} files, nothing changed, --rewrite"),
            r.wall,
            "s",
            None,
            &format!(
                "best of 3: every head read, outputs written again, figures linked; {}",
                r.phases
                    .iter()
                    .map(|(n, ms)| format!("{n} {ms:.0} ms"))
                    .collect::<Vec<_>>()
                    .join(", ")
            ),
        );
    }
    // One file changed: new content (another seed), fresh mtime.
    let changed = dir.join("data/s00000.csv");
    write_spectrum(&changed, 1_000_000, None);
    let one = run(&recipe, &["--jobs", "2"]);
    // That chain alone: the same file in a folder of its own, no cache.
    let solo_dir = work.join("solo");
    std::fs::create_dir_all(solo_dir.join("data")).unwrap_or_else(|e| panic!("{e}"));
    write_spectrum(&solo_dir.join("data/s00000.csv"), 1_000_000, None);
    let solo_recipe = solo_dir.join("recipe.yaml");
    std::fs::write(&solo_recipe, recipe_text()).unwrap_or_else(|e| panic!("{e}"));
    let solo = (0..3)
        .map(|_| run(&solo_recipe, &["--no-cache", "--jobs", "2"]).wall)
        .fold(f64::INFINITY, f64::min);
    t.row(
        "recipe.one_changed",
        &format!("re-run, 1 of {count} files changed"),
        one.wall,
        "s",
        None,
        &format!(
            "phases: {}",
            one.phases
                .iter()
                .map(|(n, ms)| format!("{n} {ms:.0} ms"))
                .collect::<Vec<_>>()
                .join(", ")
        ),
    );
    t.row(
        "recipe.one_changed",
        "that chain alone (1 file, --no-cache)",
        solo,
        "s",
        None,
        "best of 3, whole process",
    );
    let _ = std::fs::remove_dir_all(&dir);
    let _ = std::fs::remove_dir_all(&solo_dir);
    t.row(
        "recipe.one_changed",
        "ratio changed-rerun / chain alone",
        one.wall / solo,
        "x",
        Some(("<=", 2.0)),
        "",
    );
}
