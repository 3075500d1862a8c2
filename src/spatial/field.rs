//! Stationary Gaussian random fields on the grid by circulant embedding.
//!
//! The covariance matrix of a stationary field on an `nx x ny` lattice is block Toeplitz. Laid out
//! on a torus of `mx x my >= (2(nx-1), 2(ny-1))` nodes with `c[k, l] = C(min(k, mx-k) dx,
//! min(l, my-l) dy)` it becomes block circulant, diagonalised by the 2-D discrete Fourier
//! transform, with eigenvalues `lambda = DFT(c)` (real, as `c` is even). If every eigenvalue is
//! non-negative, `z = DFT(sqrt(lambda / M) (e1 + i e2))` with `e1, e2` independent standard normal
//! vectors (`M = mx my`) has real and imaginary parts that are two independent fields with exactly
//! the covariance `c` on the torus, hence `C` on the lattice (Wood & Chan 1994, *J. Comput. Graph.
//! Stat.* 3:409; Dietrich & Newsam 1997, *SIAM J. Sci. Comput.* 18:1088).
//!
//! **Negative eigenvalues.** The smallest embedding need not be non-negative definite (long ranges,
//! smooth models). The torus is then grown by a factor of about 1.25 along each axis that has more
//! than one node (sizes rounded up to products of 2, 3 and 5, which the FFT handles fastest) until
//! every eigenvalue is `>= -1e-9 max(lambda)`. If that needs more than `max_points` nodes, the
//! largest embedding tried is used with its negative eigenvalues set to zero, and the report gives
//! the bound on the error this makes in any covariance: `sum |lambda_neg| / M` (each covariance is
//! `(1/M) sum_k lambda_k exp(...)`, so dropping terms moves it by at most that; Wood & Chan 1994,
//! section 3).
//!
//! **Cost.** One simulation draws `2M` normal numbers and does `mx` FFTs of length `my` (all
//! columns) but only `ny` FFTs of length `mx` (the rows that lie on the lattice), by rustfft.
//!
//! Fields are seeded: [`CirculantField::simulate_pair`] takes a seed, and the caller derives it
//! from the index of the pair, so nothing depends on threads or on how many pairs are drawn.

use std::sync::Arc;

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::StandardNormal;
use rustfft::num_complex::Complex;
use rustfft::{Fft, FftPlanner};
use serde::{Deserialize, Serialize};

use super::model::VariogramModel;
use super::{Lattice, SpatialError};

/// Limits of the embedding search.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct EmbeddingSettings {
    /// Largest torus (nodes) tried; beyond it negative eigenvalues are clipped and reported.
    /// Default `2^23` (a 128 MiB complex buffer per simulating thread).
    pub max_points: usize,
}

impl Default for EmbeddingSettings {
    fn default() -> Self {
        EmbeddingSettings {
            max_points: 1 << 23,
        }
    }
}

/// How the embedding came out (goes into a run's summary).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct EmbeddingReport {
    /// Torus size along x.
    pub mx: usize,
    /// Torus size along y.
    pub my: usize,
    /// Number of times the torus was grown beyond the smallest size.
    pub grown: usize,
    /// Eigenvalues below `-1e-9 max(lambda)` that were set to zero (0 when exact).
    pub negative_eigenvalues: usize,
    /// Bound on the absolute error of any covariance from clipping (`sum |lambda_neg| / M`,
    /// including round-off negatives).
    pub covariance_error_bound: f64,
    /// Set when eigenvalues had to be clipped.
    pub message: Option<String>,
}

/// A prepared circulant-embedding simulator for one lattice and one covariance model.
pub struct CirculantField {
    lattice: Lattice,
    model: VariogramModel,
    mx: usize,
    my: usize,
    /// `sqrt(max(lambda, 0) / M)`, stored column-major (`k * my + l`).
    scale: Vec<f64>,
    fft_y: Arc<dyn Fft<f64>>,
    fft_x: Arc<dyn Fft<f64>>,
    report: EmbeddingReport,
}

impl std::fmt::Debug for CirculantField {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("CirculantField")
            .field("lattice", &self.lattice)
            .field("model", &self.model)
            .field("report", &self.report)
            .finish()
    }
}

/// Buffers reused from one simulation to the next (one per thread; one workspace can serve
/// several simulators).
#[derive(Default)]
pub struct Workspace {
    torus: Vec<Complex<f64>>,
    rows: Vec<Complex<f64>>,
    scratch: Vec<Complex<f64>>,
}

/// The smallest number `>= n` whose only prime factors are 2, 3 and 5.
pub fn smooth_size(n: usize) -> usize {
    let mut m = n.max(1);
    loop {
        let mut r = m;
        for p in [2, 3, 5] {
            while r.is_multiple_of(p) {
                r /= p;
            }
        }
        if r == 1 {
            return m;
        }
        m += 1;
    }
}

/// In-place 2-D forward DFT of a column-major `mx x my` array (`k * my + l`).
fn dft2(
    buf: &mut [Complex<f64>],
    mx: usize,
    my: usize,
    fft_y: &dyn Fft<f64>,
    fft_x: &dyn Fft<f64>,
) {
    let mut scratch = vec![Complex::default(); fft_y.get_inplace_scratch_len()];
    fft_y.process_with_scratch(buf, &mut scratch);
    let mut t = vec![Complex::default(); mx * my];
    transpose(buf, &mut t, mx, my, my);
    let mut scratch = vec![Complex::default(); fft_x.get_inplace_scratch_len()];
    fft_x.process_with_scratch(&mut t, &mut scratch);
    transpose(&t, buf, my, mx, mx);
}

/// Copies rows `0..rows` of the row-major view of column-major `src` (`cols x height`, element
/// `(col, row)` at `col * height + row`) into row-major `dst` (`row * cols + col`), in blocks.
fn transpose(
    src: &[Complex<f64>],
    dst: &mut [Complex<f64>],
    cols: usize,
    height: usize,
    rows: usize,
) {
    const B: usize = 16;
    for c0 in (0..cols).step_by(B) {
        let c1 = (c0 + B).min(cols);
        for r in 0..rows {
            let out = &mut dst[r * cols + c0..r * cols + c1];
            for (o, c) in out.iter_mut().zip(c0..c1) {
                *o = src[c * height + r];
            }
        }
    }
}

impl CirculantField {
    /// Prepares the simulator: checks the lattice and model, finds a non-negative embedding (or
    /// clips, see the module docs) and keeps `sqrt(lambda / M)`. The model is used as given; pass
    /// [`VariogramModel::unit_variance`] for standard normal scores.
    pub fn new(
        lattice: Lattice,
        model: VariogramModel,
        settings: EmbeddingSettings,
    ) -> Result<Self, SpatialError> {
        lattice.check()?;
        model.check("covariance model of the simulated field")?;
        if settings.max_points == 0 {
            return Err(SpatialError::Setting {
                key: "embedding.max_points".into(),
                expected: ">= 1".into(),
                got: "0".into(),
            });
        }
        let mut planner = FftPlanner::<f64>::new();
        let mut mx = smooth_size(2 * (lattice.nx - 1));
        let mut my = smooth_size(2 * (lattice.ny - 1));
        let mut grown = 0;
        let mut last: Option<(usize, usize, Vec<f64>)> = None;
        loop {
            if mx * my > settings.max_points && last.is_some() {
                break;
            }
            let lambda = eigenvalues(&lattice, &model, mx, my, &mut planner);
            let max = lambda.iter().copied().fold(0.0, f64::max);
            let tol = 1e-9 * max;
            let negative = lambda.iter().any(|&l| l < -tol);
            last = Some((mx, my, lambda));
            if !negative {
                break;
            }
            let nmx = if lattice.nx > 1 {
                smooth_size((mx as f64 * 1.25).ceil() as usize)
            } else {
                mx
            };
            let nmy = if lattice.ny > 1 {
                smooth_size((my as f64 * 1.25).ceil() as usize)
            } else {
                my
            };
            if nmx * nmy > settings.max_points || (nmx, nmy) == (mx, my) {
                break;
            }
            mx = nmx;
            my = nmy;
            grown += 1;
        }
        let (mx, my, lambda) = last.expect("at least one embedding is tried");
        let m = (mx * my) as f64;
        let max = lambda.iter().copied().fold(0.0, f64::max);
        let tol = 1e-9 * max;
        let negative_eigenvalues = lambda.iter().filter(|&&l| l < -tol).count();
        let clipped = lambda
            .iter()
            .filter(|&&l| l < 0.0)
            .fold(0.0, |acc, l| acc - l);
        let covariance_error_bound = clipped / m;
        let message = (negative_eigenvalues > 0).then(|| {
            format!(
                "the circulant embedding of the {} model (range {:.1} m) kept {negative_eigenvalues} negative eigenvalues at the largest torus allowed ({mx} x {my}); they were set to zero, which moves any covariance by at most {covariance_error_bound:.2e}",
                model.kind.name(),
                model.range
            )
        });
        let scale = lambda.iter().map(|&l| (l.max(0.0) / m).sqrt()).collect();
        Ok(CirculantField {
            lattice,
            model,
            mx,
            my,
            scale,
            fft_y: planner.plan_fft_forward(my),
            fft_x: planner.plan_fft_forward(mx),
            report: EmbeddingReport {
                mx,
                my,
                grown,
                negative_eigenvalues,
                covariance_error_bound,
                message,
            },
        })
    }

    /// The lattice simulated on.
    pub fn lattice(&self) -> Lattice {
        self.lattice
    }

    /// The covariance model simulated.
    pub fn model(&self) -> VariogramModel {
        self.model
    }

    /// How the embedding came out.
    pub fn report(&self) -> &EmbeddingReport {
        &self.report
    }

    /// Fresh buffers for [`simulate_pair_into`](Self::simulate_pair_into).
    pub fn workspace(&self) -> Workspace {
        let mut ws = Workspace::default();
        self.fit_workspace(&mut ws);
        ws
    }

    /// Grows `ws` to this simulator's sizes (never shrinks it), so one workspace can serve
    /// several simulators.
    fn fit_workspace(&self, ws: &mut Workspace) {
        let scratch = self
            .fft_y
            .get_inplace_scratch_len()
            .max(self.fft_x.get_inplace_scratch_len());
        for (buf, len) in [
            (&mut ws.torus, self.mx * self.my),
            (&mut ws.rows, self.mx * self.lattice.ny),
            (&mut ws.scratch, scratch),
        ] {
            if buf.len() < len {
                buf.resize(len, Complex::default());
            }
        }
    }

    /// Two independent fields from one seed (maps indexed `j * nx + i`).
    pub fn simulate_pair(&self, seed: u64) -> (Vec<f64>, Vec<f64>) {
        let mut ws = self.workspace();
        let mut a = vec![0.0; self.lattice.len()];
        let mut b = vec![0.0; self.lattice.len()];
        self.simulate_pair_into(seed, &mut ws, &mut a, &mut b);
        (a, b)
    }

    /// Two independent fields from one seed into `a` and `b` (length `nx * ny`), reusing `ws`.
    /// The same seed gives the same fields whatever `ws` held before.
    pub fn simulate_pair_into(&self, seed: u64, ws: &mut Workspace, a: &mut [f64], b: &mut [f64]) {
        let (nx, ny) = (self.lattice.nx, self.lattice.ny);
        assert!(
            a.len() == nx * ny && b.len() == nx * ny,
            "field buffers must hold nx * ny values"
        );
        self.fit_workspace(ws);
        let m = self.mx * self.my;
        let torus = &mut ws.torus[..m];
        let rows = &mut ws.rows[..self.mx * ny];
        let mut rng = StdRng::seed_from_u64(seed);
        for (t, &s) in torus.iter_mut().zip(&self.scale) {
            let re: f64 = rng.sample(StandardNormal);
            let im: f64 = rng.sample(StandardNormal);
            *t = Complex::new(s * re, s * im);
        }
        // all columns along y, then only the rows that lie on the lattice along x
        self.fft_y.process_with_scratch(torus, &mut ws.scratch);
        transpose(torus, rows, self.mx, self.my, ny);
        self.fft_x.process_with_scratch(rows, &mut ws.scratch);
        for j in 0..ny {
            let src = &rows[j * self.mx..j * self.mx + nx];
            for (i, v) in src.iter().enumerate() {
                a[j * nx + i] = v.re;
                b[j * nx + i] = v.im;
            }
        }
    }
}

/// The eigenvalues of the circulant embedding on an `mx x my` torus (column-major).
fn eigenvalues(
    lattice: &Lattice,
    model: &VariogramModel,
    mx: usize,
    my: usize,
    planner: &mut FftPlanner<f64>,
) -> Vec<f64> {
    let mut c = vec![Complex::default(); mx * my];
    for k in 0..mx {
        let hx = k.min(mx - k) as f64 * lattice.dx;
        for l in 0..my {
            let hy = l.min(my - l) as f64 * lattice.dy;
            c[k * my + l] = Complex::new(model.covariance(hx.hypot(hy)), 0.0);
        }
    }
    let fft_y = planner.plan_fft_forward(my);
    let fft_x = planner.plan_fft_forward(mx);
    dft2(&mut c, mx, my, fft_y.as_ref(), fft_x.as_ref());
    c.into_iter().map(|v| v.re).collect()
}
