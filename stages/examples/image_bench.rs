//! Times the particle pipeline (flatten, Otsu, label, measure) on a 4096×4096 16-bit image
//! and the power spectrum of a 2048×2048 image. A measurement to run by hand, not a test:
//!
//!     cargo run --release -p stages --example image_bench
//!
//! The images are generated deterministically (discs of varied radius on a shaded,
//! noisy background; a two-wave lattice).

use stages::image::filters::{flatten, Background, Removal};
use stages::lattice::fft::power_spectrum;
use stages::particles::label::{exclude, label_components};
use stages::particles::measure::measure;
use stages::particles::pipeline::particle_pipeline;
use stages::particles::threshold::{threshold, ThresholdOptions};
use stages::Labels;
use stages::{Axis, Image, PixelSize};
use std::time::Instant;

/// CPU time of this thread in seconds (Linux /proc; clock ticks of 10 ms), so that figures
/// on a shared machine are not inflated by other processes. None elsewhere.
fn cpu_seconds() -> Option<f64> {
    let stat = std::fs::read_to_string("/proc/thread-self/stat").ok()?;
    let rest = stat.rsplit_once(')')?.1;
    let f: Vec<&str> = rest.split_whitespace().collect();
    let (u, s): (f64, f64) = (f.get(11)?.parse().ok()?, f.get(12)?.parse().ok()?);
    Some((u + s) / 100.0)
}

fn cpu_since(start: Option<f64>) -> String {
    match (start, cpu_seconds()) {
        (Some(a), Some(b)) => format!("{:.2} s CPU", b - a),
        _ => "CPU time unavailable".into(),
    }
}

fn lcg(state: &mut u64) -> f64 {
    *state = state
        .wrapping_mul(6364136223846793005)
        .wrapping_add(1442695040888963407);
    (*state >> 11) as f64 / (1u64 << 53) as f64
}

fn image(w: usize, h: usize, data: Vec<f32>) -> Image {
    Image {
        width: w,
        height: h,
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

fn particles_image(n: usize) -> Image {
    let mut s = 1u64;
    let mut data: Vec<f32> = (0..n * n)
        .map(|i| {
            let (c, r) = ((i % n) as f64, (i / n) as f64);
            (8000.0 + 3000.0 * (c / n as f64) + 2000.0 * (r / n as f64) + 600.0 * lcg(&mut s))
                as f32
        })
        .collect();
    // About 20 000 discs of radius 4–14 px on a jittered grid.
    let step = 28;
    for gy in (step..n - step).step_by(step) {
        for gx in (step..n - step).step_by(step) {
            let rad = 4.0 + 10.0 * lcg(&mut s);
            let cx = gx as f64 + 6.0 * (lcg(&mut s) - 0.5);
            let cy = gy as f64 + 6.0 * (lcg(&mut s) - 0.5);
            let ri = rad.ceil() as isize;
            for dy in -ri..=ri {
                for dx in -ri..=ri {
                    let (x, y) = (cx as isize + dx, cy as isize + dy);
                    if (x as f64 - cx).powi(2) + (y as f64 - cy).powi(2) <= rad * rad {
                        let i = y as usize * n + x as usize;
                        data[i] = (data[i] + 20000.0).min(65535.0);
                    }
                }
            }
        }
    }
    for v in data.iter_mut() {
        *v = v.round();
    }
    image(n, n, data)
}

fn main() {
    let n = 4096;
    let img = particles_image(n);
    let mp = (n * n) as f64 / 1e6;
    // Step by step first (the same functions the pipeline calls), then the whole.
    let t = Instant::now();
    let (flat, _) =
        flatten(&img, Background::Gaussian, 50.0, Removal::Subtract, true).expect("flatten");
    let t1 = t.elapsed().as_secs_f64();
    let (mask, _) = threshold(&flat, &ThresholdOptions::default()).expect("otsu");
    let t2 = t.elapsed().as_secs_f64();
    let m: Vec<bool> = mask.labels.iter().map(|&v| v != 0).collect();
    let (raw, _) = label_components(&m, n, n, 8);
    let (lab, count, _, _) = exclude(&raw, n, n, true, 10);
    let t3 = t.elapsed().as_secs_f64();
    let lab = Labels {
        labels: lab,
        count,
        ..mask
    };
    let parts = measure(&lab, Some(&img));
    let t4 = t.elapsed().as_secs_f64();
    println!(
        "  steps: flatten {:.3} s, Otsu {:.3} s, label+exclude {:.3} s, measure {:.3} s ({} particles)",
        t1,
        t2 - t1,
        t3 - t2,
        t4 - t3,
        parts.len()
    );
    let t = Instant::now();
    let c0 = cpu_seconds();
    let (labels, parts) = particle_pipeline(&img, 50.0, 10).expect("pipeline");
    let dt = t.elapsed().as_secs_f64();
    let cpu = cpu_since(c0);
    println!(
        "particle pipeline {n}×{n} 16-bit: {:.3} s wall, {cpu} ({:.1} ms wall per megapixel), {} particles kept of {} labels",
        dt,
        1e3 * dt / mp,
        parts.len(),
        labels.count
    );
    let m = 2048;
    let lattice: Vec<f32> = (0..m * m)
        .map(|i| {
            let (x, y) = ((i % m) as f64, (i / m) as f64);
            (1000.0 + 100.0 * (x * 0.137 + y * 0.05).cos() + 80.0 * (x * 0.02 - y * 0.171).cos())
                as f32
        })
        .collect();
    let limg = image(m, m, lattice);
    let t = Instant::now();
    let c0 = cpu_seconds();
    let p = power_spectrum(&limg);
    let dt = t.elapsed().as_secs_f64();
    let cpu = cpu_since(c0);
    let mp = (m * m) as f64 / 1e6;
    println!(
        "power spectrum {m}×{m} (Hann window, FFT rows then columns): {:.3} s wall, {cpu} ({:.1} ms wall per megapixel), {} bins",
        dt,
        1e3 * dt / mp,
        p.len()
    );
}
