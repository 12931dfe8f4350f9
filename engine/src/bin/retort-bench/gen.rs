//! The deterministic data generator of the benchmarks: invented 2,000-point spectra
//! (three Voigt peaks on a linear background with seeded Gaussian noise), their text
//! in delimited and JCAMP-DX form, and a 16-bit particle image. Everything follows
//! from the seed, so the Rust harness and `bench/side_by_side.py` read the same files.

use stages::fit::shapes::{voigt_fwhm, Shape};
use stages::{Axis, Image, PixelSize};

/// Points per spectrum.
pub const POINTS: usize = 2000;
/// x step of every spectrum (x runs 0 .. 99.95).
pub const STEP: f64 = 0.05;
/// Nominal (centre, area, sigma, gamma) of the three invented peaks; each spectrum
/// jitters them by its seed.
pub const NOMINAL: [(f64, f64, f64, f64); 3] = [
    (30.0, 400.0, 1.2, 0.8),
    (45.0, 250.0, 1.0, 1.5),
    (62.0, 600.0, 1.6, 0.6),
];
/// Start values of the fits, (centre, area, sigma, gamma) per peak, the same in Rust
/// and scipy; the linear background starts at (0, 0).
pub const STARTS: [(f64, f64, f64, f64); 3] = [
    (30.5, 300.0, 1.0, 1.0),
    (44.5, 300.0, 1.0, 1.0),
    (61.5, 500.0, 1.0, 1.0),
];
/// Linear background intercept and slope, and the noise standard deviation.
pub const BACKGROUND: (f64, f64) = (20.0, 0.1);
pub const NOISE: f64 = 1.0;

/// A 64-bit linear congruential generator (Knuth's MMIX constants).
pub struct Lcg(pub u64);

impl Lcg {
    pub fn uniform(&mut self) -> f64 {
        self.0 = self
            .0
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        ((self.0 >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }
    /// Standard normal deviate (Box–Muller).
    pub fn normal(&mut self) -> f64 {
        let (a, b) = (self.uniform(), self.uniform());
        (-2.0 * a.ln()).sqrt() * (2.0 * std::f64::consts::PI * b).cos()
    }
}

/// The generated truth of one spectrum.
#[derive(Clone, Debug, serde::Serialize)]
pub struct Truth {
    pub center: [f64; 3],
    pub area: [f64; 3],
    pub sigma: [f64; 3],
    pub gamma: [f64; 3],
    /// Voigt FWHM (Olivero & Longbothum 1977) from sigma and gamma.
    pub fwhm: [f64; 3],
}

/// One generated spectrum: x, y (y rounded to 4 decimals, as written to the files,
/// so in-memory and file workloads see the same numbers) and its truth.
pub struct Generated {
    pub x: Vec<f64>,
    pub y: Vec<f64>,
    pub truth: Truth,
}

pub fn spectrum(seed: u64) -> Generated {
    let mut g = Lcg(seed.wrapping_mul(0x9E37_79B9_7F4A_7C15) ^ 0x5EED);
    let mut truth = Truth {
        center: [0.0; 3],
        area: [0.0; 3],
        sigma: [0.0; 3],
        gamma: [0.0; 3],
        fwhm: [0.0; 3],
    };
    for (k, &(c, a, s, gm)) in NOMINAL.iter().enumerate() {
        truth.center[k] = c + 0.6 * (g.uniform() - 0.5);
        truth.area[k] = a * (0.9 + 0.2 * g.uniform());
        truth.sigma[k] = s * (0.9 + 0.2 * g.uniform());
        truth.gamma[k] = gm * (0.9 + 0.2 * g.uniform());
        truth.fwhm[k] = voigt_fwhm(truth.sigma[k], truth.gamma[k]).0;
    }
    let mut d = [0.0; 4];
    let x: Vec<f64> = (0..POINTS).map(|i| round(i as f64 * STEP, 1e4)).collect();
    let y = x
        .iter()
        .map(|&v| {
            let peaks: f64 = (0..3)
                .map(|k| {
                    let p = [
                        truth.center[k],
                        truth.area[k],
                        truth.sigma[k],
                        truth.gamma[k],
                    ];
                    Shape::Voigt.eval(&p, v, &mut d)
                })
                .sum();
            round(
                peaks + BACKGROUND.0 + BACKGROUND.1 * v + NOISE * g.normal(),
                1e4,
            )
        })
        .collect();
    Generated { x, y, truth }
}

fn round(v: f64, scale: f64) -> f64 {
    (v * scale).round() / scale
}

/// Comma-separated text with a header line, x and y to 4 decimals.
pub fn delimited_text(x: &[f64], y: &[f64]) -> String {
    use std::fmt::Write;
    let mut s = String::with_capacity(x.len() * 20);
    s.push_str("position (arb),intensity (arb)\n");
    for (a, b) in x.iter().zip(y) {
        let _ = writeln!(s, "{a:.4},{b:.4}");
    }
    s
}

/// JCAMP-DX 4.24 text with an `(X++(Y..Y))` table in AFFN form, ten ordinates a line,
/// ordinates as integers times YFACTOR 0.0001.
pub fn jcamp_text(x: &[f64], y: &[f64]) -> String {
    use std::fmt::Write;
    let n = x.len();
    let mut s = String::with_capacity(n * 8);
    let _ = write!(
        s,
        "##TITLE=generated spectrum\n##JCAMP-DX=4.24\n##DATA TYPE=UNKNOWN\n##XUNITS=ARBITRARY UNITS\n##YUNITS=ARBITRARY UNITS\n##XFACTOR=1\n##YFACTOR=0.0001\n##FIRSTX={}\n##LASTX={}\n##NPOINTS={n}\n##XYDATA=(X++(Y..Y))\n",
        x[0],
        x[n - 1]
    );
    for (row, chunk) in y.chunks(10).enumerate() {
        let _ = write!(s, "{}", x[row * 10]);
        for v in chunk {
            let _ = write!(s, " {}", (v * 1e4).round() as i64);
        }
        s.push('\n');
    }
    s.push_str("##END=\n");
    s
}

/// A `side`-by-side data folder: `spectra/s00000.csv`..., and `truth.json`.
pub fn write_folder(dir: &std::path::Path, count: usize) -> std::io::Result<()> {
    let spectra = dir.join("spectra");
    std::fs::create_dir_all(&spectra)?;
    let mut truths = Vec::with_capacity(count);
    for i in 0..count {
        let g = spectrum(i as u64 + 1);
        std::fs::write(
            spectra.join(format!("s{i:05}.csv")),
            delimited_text(&g.x, &g.y),
        )?;
        truths.push(g.truth);
    }
    let doc = serde_json::json!({
        "generator": "retort-bench (engine/src/bin/retort-bench/gen.rs)",
        "points": POINTS,
        "starts": STARTS,
        "background_start": [0.0, 0.0],
        "truth": truths,
    });
    std::fs::write(
        dir.join("truth.json"),
        serde_json::to_vec_pretty(&doc).unwrap_or_default(),
    )
}

/// A 16-bit micrograph with about 20,000 bright discs (radius 4–14 px) on a shaded,
/// noisy background.
pub fn particle_image(n: usize) -> Image {
    let mut g = Lcg(7);
    let mut data: Vec<f32> = (0..n * n)
        .map(|i| {
            let (c, r) = ((i % n) as f64, (i / n) as f64);
            (8000.0 + 3000.0 * (c / n as f64) + 2000.0 * (r / n as f64) + 600.0 * g.uniform())
                as f32
        })
        .collect();
    let step = 28;
    for gy in (step..n.saturating_sub(step)).step_by(step) {
        for gx in (step..n.saturating_sub(step)).step_by(step) {
            let rad = 4.0 + 10.0 * g.uniform();
            let cx = gx as f64 + 6.0 * (g.uniform() - 0.5);
            let cy = gy as f64 + 6.0 * (g.uniform() - 0.5);
            let ri = rad.ceil() as isize;
            for dy in -ri..=ri {
                for dx in -ri..=ri {
                    let (px, py) = (cx as isize + dx, cy as isize + dy);
                    if (px as f64 - cx).powi(2) + (py as f64 - cy).powi(2) <= rad * rad {
                        let i = py as usize * n + px as usize;
                        data[i] = (data[i] + 20000.0).min(65535.0);
                    }
                }
            }
        }
    }
    for v in data.iter_mut() {
        *v = v.round();
    }
    Image {
        width: n,
        height: n,
        data,
        pixel_size: Some(PixelSize {
            x: 1.0,
            y: 1.0,
            unit: "nm".into(),
        }),
        z_axis: Axis::new("intensity", "counts"),
        source_bits: 16,
        metadata: Default::default(),
    }
}
