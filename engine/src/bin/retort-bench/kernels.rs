//! In-process workloads: import, smoothing, backgrounds, fitting and the particle
//! pipeline, timed by this thread's CPU time (so another process on the machine does not
//! inflate a per-core figure) with wall time beside it.

use crate::gen::{self, Generated, STARTS};
use crate::table::Table;
use stages::fit::{fit_spectrum, FitSpec};
use stages::{Axis, Spectrum};
use std::time::Instant;

/// Nanoseconds this thread has spent on a CPU (Linux `/proc/thread-self/schedstat`).
pub fn thread_cpu_ns() -> Option<u64> {
    let s = std::fs::read_to_string("/proc/thread-self/schedstat").ok()?;
    s.split_whitespace().next()?.parse().ok()
}

/// Wall and CPU seconds of one call of `f`.
pub struct Timing {
    pub wall: f64,
    pub cpu: f64,
}

impl Timing {
    /// CPU seconds when the platform tells them, else wall seconds.
    pub fn per_core(&self) -> f64 {
        if self.cpu > 0.0 {
            self.cpu
        } else {
            self.wall
        }
    }
}

pub fn time<T>(f: impl FnOnce() -> T) -> (T, Timing) {
    let c0 = thread_cpu_ns();
    let t0 = Instant::now();
    let v = f();
    let wall = t0.elapsed().as_secs_f64();
    let cpu = match (c0, thread_cpu_ns()) {
        (Some(a), Some(b)) => (b - a) as f64 / 1e9,
        _ => 0.0,
    };
    (v, Timing { wall, cpu })
}

/// Repeats `f` over rounds until `min_seconds` of wall time have passed (at least
/// once) and returns the rounds and the timing of all of them.
pub fn repeat(min_seconds: f64, mut f: impl FnMut()) -> (usize, Timing) {
    let mut rounds = 0;
    let (_, t) = time(|| {
        let t0 = Instant::now();
        while rounds == 0 || t0.elapsed().as_secs_f64() < min_seconds {
            f();
            rounds += 1;
        }
    });
    (rounds, t)
}

fn spectrum_of(g: &Generated) -> Spectrum {
    Spectrum::new(
        g.x.clone(),
        g.y.clone(),
        Axis::new("position", "arb"),
        Axis::new("intensity", "arb"),
    )
}

/// Import of delimited text and JCAMP-DX, MB/s per core.
pub fn import(t: &mut Table, spectra: &[Generated], min_seconds: f64) {
    let csv: Vec<String> = spectra
        .iter()
        .map(|g| gen::delimited_text(&g.x, &g.y))
        .collect();
    let jdx: Vec<String> = spectra
        .iter()
        .map(|g| gen::jcamp_text(&g.x, &g.y))
        .collect();
    let o = stages::import::delimited::Options::default();
    let bytes: usize = csv.iter().map(String::len).sum();
    let mut ok = true;
    let (rounds, tm) = repeat(min_seconds, || {
        for s in &csv {
            ok &= stages::import::delimited::parse("bench.csv", s.as_bytes(), &o)
                .map(|s| s.y.len() == gen::POINTS)
                .unwrap_or(false);
        }
    });
    let mbps = (bytes * rounds) as f64 / 1e6 / tm.per_core();
    t.row(
        "import.delimited",
        "throughput",
        mbps,
        "MB/s/core",
        Some((">=", 200.0)),
        &format!(
            "{} files of {:.1} kB, {rounds} rounds, parsed ok: {ok}",
            csv.len(),
            bytes as f64 / csv.len() as f64 / 1e3
        ),
    );
    let jo = stages::import::jcamp::Options::default();
    let bytes: usize = jdx.iter().map(String::len).sum();
    let mut ok = true;
    let (rounds, tm) = repeat(min_seconds, || {
        for s in &jdx {
            ok &= stages::import::jcamp::parse("bench.jdx", s.as_bytes(), &jo)
                .map(|(s, _)| s.y.len() == gen::POINTS)
                .unwrap_or(false);
        }
    });
    let mbps = (bytes * rounds) as f64 / 1e6 / tm.per_core();
    t.row(
        "import.jcamp",
        "throughput",
        mbps,
        "MB/s/core",
        None,
        &format!(
            "{} files of {:.1} kB (AFFN), {rounds} rounds, parsed ok: {ok}",
            jdx.len(),
            bytes as f64 / jdx.len() as f64 / 1e3
        ),
    );
}

/// The smoothing and background kernels on every spectrum: (name, µs per spectrum).
pub fn filters(spectra: &[Generated], min_seconds: f64) -> Vec<(&'static str, f64, String)> {
    let n = spectra.len();
    let mut out = Vec::new();
    let (rounds, tm) = repeat(min_seconds, || {
        for g in spectra {
            let s = stages::smooth::savitzky_golay::savitzky_golay(&g.y, 11, 3, 0);
            std::hint::black_box(&s);
        }
    });
    out.push((
        "savitzky_golay",
        tm.per_core() / (n * rounds) as f64 * 1e6,
        "window 11, order 3".to_string(),
    ));
    let mut iterations = 0usize;
    let mut calls = 0usize;
    let (rounds, tm) = repeat(min_seconds, || {
        for g in spectra {
            if let Ok(r) = stages::background::asls::asls(&g.y, 1e5, 0.01, 10) {
                iterations += r.iterations;
            }
            calls += 1;
        }
    });
    out.push((
        "asls",
        tm.per_core() / (n * rounds) as f64 * 1e6,
        format!(
            "lambda 1e5, p 0.01, at most 10 iterations (mean {:.2})",
            iterations as f64 / calls.max(1) as f64
        ),
    ));
    let mut iterations = 0usize;
    let mut calls = 0usize;
    let (rounds, tm) = repeat(min_seconds, || {
        for g in spectra {
            if let Ok(r) = stages::background::shirley::shirley(&g.x, &g.y, 10, 1e-6, 50) {
                iterations += r.iterations;
            }
            calls += 1;
        }
    });
    out.push((
        "shirley",
        tm.per_core() / (n * rounds) as f64 * 1e6,
        format!(
            "10 end points, tolerance 1e-6 (mean {:.2} iterations)",
            iterations as f64 / calls.max(1) as f64
        ),
    ));
    out
}

pub fn filter_rows(t: &mut Table, spectra: &[Generated], min_seconds: f64) {
    for (name, us, note) in filters(spectra, min_seconds) {
        t.row(name, "time per 2,000-point spectrum", us, "us", None, &note);
    }
}

/// The fit options shared with `bench/side_by_side.py`: three Voigt peaks from
/// [`STARTS`], linear background from (0, 0), unweighted.
pub fn fit_spec() -> FitSpec {
    let mut peaks = serde_json::Map::new();
    for (k, &(c, a, s, g)) in STARTS.iter().enumerate() {
        peaks.insert(
            format!("p{}", k + 1),
            serde_json::json!({ "center": c, "area": a, "sigma": s, "gamma": g }),
        );
    }
    let v = serde_json::json!({
        "shape": "voigt",
        "background": "linear",
        "background_parameters": { "c0": 0.0, "c1": 0.0 },
        "weights": "none",
        "peaks": peaks,
    });
    serde_json::from_value(v).unwrap_or_else(|e| panic!("fit options: {e}"))
}

/// Outcome of fitting a set of spectra.
pub struct FitFigures {
    pub per_second: f64,
    pub mean_iterations: f64,
    pub failures: usize,
    /// RMS relative error of centres, areas and FWHMs against the truth.
    pub rms: [f64; 3],
}

pub fn fits(spectra: &[Generated]) -> FitFigures {
    let spec = fit_spec();
    let data: Vec<Spectrum> = spectra.iter().map(spectrum_of).collect();
    let (outcomes, tm) = time(|| {
        data.iter()
            .map(|s| fit_spectrum(s, &spec))
            .collect::<Vec<_>>()
    });
    let mut iterations = 0usize;
    let mut failures = 0usize;
    let mut sq = [0.0f64; 3];
    let mut terms = 0usize;
    for (o, g) in outcomes.iter().zip(spectra) {
        match o {
            Ok(f) if f.statistics.converged => {
                iterations += f.statistics.iterations;
                for (k, p) in f.peaks.iter().enumerate().take(3) {
                    let tr = &g.truth;
                    sq[0] += ((p.center.value - tr.center[k]) / tr.center[k]).powi(2);
                    sq[1] += ((p.area.value - tr.area[k]) / tr.area[k]).powi(2);
                    sq[2] += ((p.fwhm.value - tr.fwhm[k]) / tr.fwhm[k]).powi(2);
                    terms += 1;
                }
            }
            _ => failures += 1,
        }
    }
    let ok = (spectra.len() - failures).max(1);
    FitFigures {
        per_second: spectra.len() as f64 / tm.per_core(),
        mean_iterations: iterations as f64 / ok as f64,
        failures,
        rms: sq.map(|s| (s / terms.max(1) as f64).sqrt()),
    }
}

pub fn fit_rows(t: &mut Table, spectra: &[Generated]) {
    let f = fits(spectra);
    t.row(
        "fit.voigt3",
        "throughput",
        f.per_second,
        "spectra/s/core",
        None,
        &format!(
            "{} spectra, mean {:.1} iterations, {} not converged",
            spectra.len(),
            f.mean_iterations,
            f.failures
        ),
    );
    for (k, what) in ["centre", "area", "fwhm"].iter().enumerate() {
        t.row(
            "fit.voigt3",
            &format!("RMS relative error of {what}"),
            f.rms[k],
            "",
            None,
            "against the generated truth",
        );
    }
}

/// The particle pipeline on an n×n 16-bit image.
pub fn particles(t: &mut Table, n: usize) {
    let img = gen::particle_image(n);
    let (r, tm) = time(|| stages::particles::pipeline::particle_pipeline(&img, 50.0, 10));
    let note = match r {
        Ok((_, parts)) => format!("{} particles", parts.len()),
        Err(e) => format!("failed: {e}"),
    };
    t.row(
        "particles.pipeline",
        &format!("time on {n}x{n} 16-bit"),
        tm.wall,
        "s",
        None,
        &format!(
            "{note}; flatten (Gaussian 50 px), Otsu, label, measure; {:.2} s CPU",
            tm.cpu
        ),
    );
}
