//! The fit model: peaks plus a background, over a table of named parameters that are
//! free, fixed or linked to others by an expression; and the least-squares problem it
//! poses (weighted residuals and their analytic Jacobian with linked parameters'
//! derivatives chained through their expressions).

use super::expr::Expr;
use super::faddeeva::w_many;
use super::shapes::{voigt_arguments, Shape};
use super::solver::{Bounds, Problem};
use nalgebra::DMatrix;

/// Where a parameter's value comes from.
#[derive(Clone, Debug)]
pub enum Source {
    /// Free: index into the solver's parameter vector.
    Free(usize),
    Fixed,
    /// Linked: the parsed expression and its text as written.
    Tied(Expr, String),
}

/// One named parameter of the model.
#[derive(Clone, Debug)]
pub struct ModelParam {
    /// Dotted name, e.g. `cc.center`, `background.c1`.
    pub name: String,
    pub unit: String,
    /// Start value (free), the value (fixed), or a placeholder (tied).
    pub value: f64,
    pub bounds: Bounds,
    pub source: Source,
}

/// The background under the peaks.
#[derive(Clone, Debug, PartialEq)]
pub enum Background {
    /// No background term.
    None,
    /// A fixed curve (from an upstream background stage), on the fit points.
    Curve(Vec<f64>),
    /// Σ c_k (x − x_ref)^k, k = 0..=degree; parameters at `offset..`.
    Polynomial {
        degree: usize,
        x_ref: f64,
        offset: usize,
    },
    /// a·exp(−b·x); parameters `a`, `b` at `offset..`.
    Exponential { offset: usize },
}

/// One peak term: shape and where its parameters start in the table.
#[derive(Clone, Debug)]
pub struct PeakTerm {
    pub name: String,
    pub shape: Shape,
    pub offset: usize,
}

/// Peaks, background and the parameter table.
#[derive(Clone, Debug)]
pub struct Model {
    pub params: Vec<ModelParam>,
    pub peaks: Vec<PeakTerm>,
    pub background: Background,
    /// Tied parameters in an order where each depends only on earlier ones.
    pub tie_order: Vec<usize>,
    pub n_free: usize,
}

impl Model {
    /// Index of the parameter with this name.
    pub fn index(&self, name: &str) -> Option<usize> {
        self.params.iter().position(|p| p.name == name)
    }

    /// Orders the tied parameters so each is computed after those it uses; an error
    /// names a cycle or an unknown name.
    pub fn order_ties(&mut self) -> Result<(), String> {
        let m = self.params.len();
        let mut state = vec![0u8; m]; // 0 new, 1 visiting, 2 done
        let mut order = Vec::new();
        fn visit(
            model: &Model,
            k: usize,
            state: &mut [u8],
            order: &mut Vec<usize>,
        ) -> Result<(), String> {
            if state[k] == 2 {
                return Ok(());
            }
            if state[k] == 1 {
                return Err(format!(
                    "the links through '{}' form a cycle",
                    model.params[k].name
                ));
            }
            state[k] = 1;
            if let Source::Tied(e, text) = &model.params[k].source {
                for n in e.names() {
                    let j = model.index(&n).ok_or_else(|| {
                        format!(
                            "'{}' = '{text}' refers to '{n}', which is not a parameter of this fit",
                            model.params[k].name
                        )
                    })?;
                    visit(model, j, state, order)?;
                }
                order.push(k);
            }
            state[k] = 2;
            Ok(())
        }
        for k in 0..m {
            visit(self, k, &mut state, &mut order)?;
        }
        self.tie_order = order;
        Ok(())
    }

    /// Fills all parameter values from the free vector and the links; `chain` (params ×
    /// free) receives ∂value/∂free. `grad` is scratch of length params.
    pub fn resolve(
        &self,
        theta: &[f64],
        values: &mut [f64],
        chain: &mut DMatrix<f64>,
        grad: &mut [f64],
    ) -> Result<(), String> {
        chain.fill(0.0);
        for (k, p) in self.params.iter().enumerate() {
            match p.source {
                Source::Free(j) => {
                    values[k] = theta[j];
                    chain[(k, j)] = 1.0;
                }
                Source::Fixed => values[k] = p.value,
                Source::Tied(..) => {}
            }
        }
        for &k in &self.tie_order {
            if let Source::Tied(e, text) = &self.params[k].source {
                let lookup = |n: &str| self.index(n);
                let v = e
                    .eval_grad(&lookup, values, grad)
                    .map_err(|m| format!("'{}' = '{text}': {m}", self.params[k].name))?;
                values[k] = v;
                for (r, &g) in grad.iter().enumerate() {
                    if g != 0.0 && r != k {
                        for j in 0..self.n_free {
                            let c = chain[(r, j)];
                            if c != 0.0 {
                                chain[(k, j)] += g * c;
                            }
                        }
                    }
                }
            }
        }
        Ok(())
    }

    /// Background value at x and its derivatives into `d` (full parameter-length row).
    #[inline]
    fn background_at(&self, i: usize, x: f64, values: &[f64], d: &mut [f64]) -> f64 {
        match &self.background {
            Background::None => 0.0,
            Background::Curve(c) => c[i],
            Background::Polynomial {
                degree,
                x_ref,
                offset,
            } => {
                let t = x - x_ref;
                let mut pw = 1.0;
                let mut s = 0.0;
                for k in 0..=*degree {
                    d[offset + k] = pw;
                    s += values[offset + k] * pw;
                    pw *= t;
                }
                s
            }
            Background::Exponential { offset } => {
                let (a, b) = (values[*offset], values[offset + 1]);
                let e = (-b * x).exp();
                d[*offset] = e;
                d[offset + 1] = -x * a * e;
                a * e
            }
        }
    }

    /// Background (0 for a fixed curve) and each peak at every x: `out[0]` is the
    /// background, `out[k + 1]` peak k. Voigt peaks use the batched Faddeeva function.
    pub fn parts_all(&self, x: &[f64], values: &[f64]) -> Vec<Vec<f64>> {
        let n = x.len();
        let mut out = vec![vec![0.0; n]; self.peaks.len() + 1];
        let mut scratch = vec![0.0; self.params.len()];
        if !matches!(self.background, Background::Curve(_)) {
            for (i, &xi) in x.iter().enumerate() {
                out[0][i] = self.background_at(i, xi, values, &mut scratch);
            }
        }
        let (mut re, mut im, mut z) = (vec![0.0; n], vec![0.0; n], vec![0.0; n]);
        for (k, pk) in self.peaks.iter().enumerate() {
            let np = pk.shape.n_params();
            let p = &values[pk.offset..pk.offset + np];
            let voigt = pk.shape == Shape::Voigt;
            if voigt {
                let mut y = 0.0;
                for (zi, &xi) in z.iter_mut().zip(x) {
                    (*zi, y) = voigt_arguments(p, xi);
                }
                w_many(&z, y, &mut re, &mut im);
            }
            for (i, &xi) in x.iter().enumerate() {
                let w = voigt.then(|| (re[i], im[i]));
                out[k + 1][i] = pk.shape.eval_with(p, xi, w, &mut scratch[..np]);
            }
        }
        out
    }
}

/// The weighted least-squares problem of a model on the fit points.
pub struct FitProblem<'a> {
    pub model: &'a Model,
    pub x: &'a [f64],
    pub y: &'a [f64],
    /// 1/σ per point (all ones when unweighted).
    pub w: &'a [f64],
    values: Vec<f64>,
    chain: DMatrix<f64>,
    grad: Vec<f64>,
    /// −wᵢ·∂fᵢ/∂(model parameter), parameter-major (params × points), so the
    /// Jacobian is built by contiguous column updates.
    dfdp: Vec<f64>,
    /// One point's derivatives before they are scattered into `dfdp`.
    row: Vec<f64>,
    /// Per Voigt peak (None for other shapes): w(z) at every point, real and imaginary.
    wbuf: Vec<Option<(Vec<f64>, Vec<f64>)>>,
    /// Scaled offsets of one Voigt peak's Faddeeva arguments.
    zbuf: Vec<f64>,
    /// Non-zero entries of `chain` per parameter: (free index, coefficient).
    sparse: Vec<Vec<(usize, f64)>>,
}

impl<'a> FitProblem<'a> {
    pub fn new(model: &'a Model, x: &'a [f64], y: &'a [f64], w: &'a [f64]) -> Self {
        let m = model.params.len();
        FitProblem {
            model,
            x,
            y,
            w,
            values: vec![0.0; m],
            chain: DMatrix::zeros(m, model.n_free),
            grad: vec![0.0; m],
            dfdp: vec![0.0; x.len() * m],
            row: vec![0.0; m],
            wbuf: model
                .peaks
                .iter()
                .map(|p| {
                    (p.shape == Shape::Voigt).then(|| (vec![0.0; x.len()], vec![0.0; x.len()]))
                })
                .collect(),
            zbuf: vec![0.0; x.len()],
            sparse: vec![Vec::new(); m],
        }
    }
    /// All parameter values at the latest evaluation.
    pub fn values(&self) -> &[f64] {
        &self.values
    }
    /// ∂value/∂free at the latest evaluation.
    pub fn chain(&self) -> &DMatrix<f64> {
        &self.chain
    }
}

impl Problem for FitProblem<'_> {
    fn n_residuals(&self) -> usize {
        self.x.len()
    }
    fn n_params(&self) -> usize {
        self.model.n_free
    }
    fn residuals(&mut self, theta: &[f64], r: &mut [f64]) -> bool {
        let model = self.model;
        if model
            .resolve(theta, &mut self.values, &mut self.chain, &mut self.grad)
            .is_err()
        {
            return false;
        }
        for (k, list) in self.sparse.iter_mut().enumerate() {
            list.clear();
            for j in 0..model.n_free {
                let c = self.chain[(k, j)];
                if c != 0.0 {
                    list.push((j, c));
                }
            }
        }
        let values = &self.values;
        // Faddeeva function of every Voigt peak at all points at once (the hot loop).
        for (pk, buf) in model.peaks.iter().zip(self.wbuf.iter_mut()) {
            if let Some((re, im)) = buf {
                let p = &values[pk.offset..pk.offset + 4];
                let mut y = 0.0;
                for (z, &x) in self.zbuf.iter_mut().zip(self.x) {
                    (*z, y) = voigt_arguments(p, x);
                }
                w_many(&self.zbuf, y, re, im);
            }
        }
        let row = &mut self.row;
        let npts = self.x.len();
        for (i, &x) in self.x.iter().enumerate() {
            let mut f = model.background_at(i, x, values, row);
            for (pk, buf) in model.peaks.iter().zip(&self.wbuf) {
                let n = pk.shape.n_params();
                let o = pk.offset;
                let w = buf.as_ref().map(|(re, im)| (re[i], im[i]));
                f += pk
                    .shape
                    .eval_with(&values[o..o + n], x, w, &mut row[o..o + n]);
            }
            let wi = self.w[i];
            r[i] = (self.y[i] - f) * wi;
            for (k, d) in row.iter().enumerate() {
                self.dfdp[k * npts + i] = -wi * d;
            }
        }
        r.iter().all(|v| v.is_finite())
    }
    fn jacobian(&mut self, _theta: &[f64], j: &mut DMatrix<f64>) {
        let n = self.x.len();
        let jm = j.as_mut_slice(); // column-major: column `col` is jm[col·n..(col+1)·n]
        jm.fill(0.0);
        for (k, list) in self.sparse.iter().enumerate() {
            let d = &self.dfdp[k * n..(k + 1) * n];
            for &(col, c) in list {
                for (jc, dk) in jm[col * n..(col + 1) * n].iter_mut().zip(d) {
                    *jc += c * dk;
                }
            }
        }
    }
}

/// Central-difference Jacobian of any problem, for checking the analytic one.
pub fn numeric_jacobian<P: Problem>(problem: &mut P, theta: &[f64]) -> Option<DMatrix<f64>> {
    let n = problem.n_residuals();
    let p = problem.n_params();
    let mut j = DMatrix::zeros(n, p);
    let mut a = vec![0.0; n];
    let mut b = vec![0.0; n];
    let mut t = theta.to_vec();
    for k in 0..p {
        let h = 1e-6 * theta[k].abs().max(1e-3);
        t[k] = theta[k] + h;
        let ok1 = problem.residuals(&t, &mut a);
        t[k] = theta[k] - h;
        let ok2 = problem.residuals(&t, &mut b);
        t[k] = theta[k];
        if !(ok1 && ok2) {
            return None;
        }
        for i in 0..n {
            j[(i, k)] = (a[i] - b[i]) / (2.0 * h);
        }
    }
    Some(j)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn free(name: &str, v: f64, j: usize) -> ModelParam {
        ModelParam {
            name: name.into(),
            unit: String::new(),
            value: v,
            bounds: Bounds { lo: None, hi: None },
            source: Source::Free(j),
        }
    }
    fn tied(name: &str, e: &str) -> ModelParam {
        ModelParam {
            name: name.into(),
            unit: String::new(),
            value: 0.0,
            bounds: Bounds { lo: None, hi: None },
            source: Source::Tied(Expr::parse(e).unwrap(), e.into()),
        }
    }

    /// Every shape, each background form, and links in one model; the analytic
    /// Jacobian must equal central differences.
    #[test]
    fn analytic_jacobian_matches_numeric_for_every_model() {
        for bg in 0..3 {
            let mut params = vec![
                free("a.center", 2.0, 0),
                free("a.area", 3.0, 1),
                free("a.fwhm", 0.9, 2),
                tied("b.center", "a.center + 1.5"),
                tied("b.area", "0.5 * a.area"),
                tied("b.fwhm", "a.fwhm"),
                free("c.center", 6.0, 3),
                free("c.area", 2.0, 4),
                free("c.fwhm", 0.7, 5),
                free("c.eta", 0.4, 6),
                free("d.center", 8.0, 7),
                free("d.area", 1.5, 8),
                free("d.sigma", 0.3, 9),
                tied("d.gamma", "d.sigma * 0.5 + 0.1 / c.fwhm"),
            ];
            let mut n_free = 10;
            let background = match bg {
                0 => Background::None,
                1 => {
                    params.push(free("background.c0", 1.0, 10));
                    params.push(free("background.c1", -0.1, 11));
                    params.push(free("background.c2", 0.01, 12));
                    n_free = 13;
                    Background::Polynomial {
                        degree: 2,
                        x_ref: 5.0,
                        offset: 14,
                    }
                }
                _ => {
                    params.push(free("background.a", 2.0, 10));
                    params.push(free("background.b", 0.2, 11));
                    n_free = 12;
                    Background::Exponential { offset: 14 }
                }
            };
            let mut model = Model {
                peaks: vec![
                    PeakTerm {
                        name: "a".into(),
                        shape: Shape::Gaussian,
                        offset: 0,
                    },
                    PeakTerm {
                        name: "b".into(),
                        shape: Shape::Lorentzian,
                        offset: 3,
                    },
                    PeakTerm {
                        name: "c".into(),
                        shape: Shape::PseudoVoigt,
                        offset: 6,
                    },
                    PeakTerm {
                        name: "d".into(),
                        shape: Shape::Voigt,
                        offset: 10,
                    },
                ],
                params,
                background,
                tie_order: vec![],
                n_free,
            };
            model.order_ties().unwrap();
            let x: Vec<f64> = (0..120).map(|i| i as f64 * 0.1).collect();
            let y = vec![0.3; x.len()];
            let w: Vec<f64> = (0..x.len()).map(|i| 1.0 + 0.01 * i as f64).collect();
            let theta: Vec<f64> = model
                .params
                .iter()
                .filter_map(|p| matches!(p.source, Source::Free(_)).then_some(p.value))
                .collect();
            let mut pr = FitProblem::new(&model, &x, &y, &w);
            let num = numeric_jacobian(&mut pr, &theta).unwrap();
            let mut r = vec![0.0; x.len()];
            assert!(pr.residuals(&theta, &mut r));
            let mut an = DMatrix::zeros(x.len(), n_free);
            pr.jacobian(&theta, &mut an);
            for i in 0..x.len() {
                for k in 0..n_free {
                    let (a, b) = (an[(i, k)], num[(i, k)]);
                    assert!(
                        (a - b).abs() <= 1e-6 * (b.abs() + 1e-2),
                        "background {bg}, point {i}, parameter {k}: analytic {a} numeric {b}"
                    );
                }
            }
        }
    }

    #[test]
    fn cycles_and_unknown_names_are_refused() {
        let mut m = Model {
            params: vec![tied("a.x", "b.x + 1"), tied("b.x", "a.x * 2")],
            peaks: vec![],
            background: Background::None,
            tie_order: vec![],
            n_free: 0,
        };
        assert!(m.order_ties().unwrap_err().contains("cycle"));
        m.params = vec![tied("a.x", "q.x + 1")];
        assert!(m.order_ties().unwrap_err().contains("'q.x'"));
    }
}
