use errorfunctions::ComplexErrorFunctions;
use nalgebra::Complex;
use std::f64::consts::PI;

fn coeffs(n: usize) -> (Vec<f64>, f64) {
    let m = 2 * n;
    let m2 = 2 * m;
    let l = (n as f64 / 2f64.sqrt()).sqrt();
    // f over k = -M+1..M-1, prefixed with 0: length 2M
    let mut f = vec![0.0; m2];
    for (idx, k) in (-(m as i64) + 1..m as i64).enumerate() {
        let theta = k as f64 * PI / m as f64;
        let t = l * (theta / 2.0).tan();
        f[idx + 1] = (-t * t).exp() * (l * l + t * t);
    }
    // fftshift: rotate by m2/2
    let mut g = vec![0.0; m2];
    for i in 0..m2 {
        g[i] = f[(i + m2 / 2) % m2];
    }
    // real part of DFT / m2
    let mut a = vec![0.0; m2];
    for k in 0..m2 {
        let mut s = 0.0;
        for j in 0..m2 {
            s += g[j] * (-2.0 * PI * (j * k) as f64 / m2 as f64).cos();
        }
        a[k] = s / m2 as f64;
    }
    // a(2:N+1) flipped: polynomial coefficients highest first
    let mut c: Vec<f64> = a[1..=n].to_vec();
    c.reverse();
    (c, l)
}

fn w_fast(z: Complex<f64>, c: &[f64], l: f64) -> Complex<f64> {
    let iz = Complex::new(-z.im, z.re);
    let den = Complex::new(l, 0.0) - iz;
    let zz = (Complex::new(l, 0.0) + iz) / den;
    let mut p = Complex::new(0.0, 0.0);
    for &a in c {
        p = p * zz + a;
    }
    let inv = 1.0 / den;
    2.0 * p * inv * inv + inv / PI.sqrt()
}

fn main() {
    for n in [36usize, 40] {
        let (c, l) = coeffs(n);
        for y0 in [1e-2, 3e-2, 5e-2] {
            for ratio in [1e-3, 3e-3, 1e-2] {
                let mut worst_abs = 0.0f64;
                let mut worst_re = 0.0f64;
                let mut at = (0.0, 0.0);
                for xi in 0..4000 {
                    let x = if xi < 2000 {
                        xi as f64 * 0.005
                    } else {
                        10f64.powf(1.0 + 4.0 * (xi - 2000) as f64 / 2000.0)
                    };
                    for yi in 0..80 {
                        let y = 10f64.powf(-4.0 + 8.0 * yi as f64 / 79.0);
                        if y < y0 || y < ratio * x {
                            continue;
                        }
                        for s in [1.0, -1.0] {
                            let z = Complex::new(s * x, y);
                            let a = z.w();
                            let b = w_fast(z, &c, l);
                            let e = (a - b).norm() / a.norm();
                            let er = (a.re - b.re).abs() / a.re.abs();
                            worst_abs = worst_abs.max(e);
                            if er > worst_re {
                                worst_re = er;
                                at = (x, y);
                            }
                        }
                    }
                }
                println!("N={n} y0={y0} ratio={ratio}: worst rel |w| err {worst_abs:.2e}, worst rel Re err {worst_re:.2e} at {at:?}");
            }
        }
    }
    let (c, l) = coeffs(40);
    for &(lo, hi, y) in &[(0.0, 6.0, 0.5), (6.0, 30.0, 0.5), (30.0, 60.0, 0.5)] {
        let n = 1_000_000;
        let t = std::time::Instant::now();
        let mut s = 0.0;
        for i in 0..n {
            let x = lo + (hi - lo) * (i as f64 / n as f64);
            s += Complex::new(x, y).w().re;
        }
        let t1 = t.elapsed().as_secs_f64() * 1e9 / n as f64;
        let t = std::time::Instant::now();
        for i in 0..n {
            let x = lo + (hi - lo) * (i as f64 / n as f64);
            s += w_fast(Complex::new(x, y), &c, l).re;
        }
        let t2 = t.elapsed().as_secs_f64() * 1e9 / n as f64;
        println!("x in [{lo},{hi}] y={y}: crate {t1:.1} ns, rational {t2:.1} ns ({s})");
    }
}
