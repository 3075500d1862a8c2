//! Spectral tools for the generator: a radix-2 fast Fourier transform (Cooley & Tukey 1965),
//! Gaussian random fields by spectral filtering of white noise, and Gaussian smoothing.
//!
//! A Gaussian random field here has the Gaussian covariance C(r) = exp(-(r/L)^2) with correlation
//! length L: white noise on a padded power-of-two grid is multiplied in the wavenumber domain by the
//! transfer function exp(-2 pi^2 s^2 |k|^2) of a Gaussian kernel of standard deviation s = L/2
//! (convolving white noise with that kernel gives exactly that covariance), transformed back,
//! cropped and standardised to zero mean and unit variance.

use rand::RngExt;
use rand::rngs::StdRng;
use rand_distr::StandardNormal;
use std::f64::consts::PI;

/// In-place radix-2 complex FFT of `re` + i `im` (length a power of two). The inverse transform
/// includes the 1/n factor.
pub fn fft(re: &mut [f64], im: &mut [f64], inverse: bool) {
    let n = re.len();
    debug_assert!(n.is_power_of_two() && im.len() == n);
    if n < 2 {
        return;
    }
    // bit-reversal permutation
    let mut j = 0usize;
    for i in 1..n {
        let mut bit = n >> 1;
        while j & bit != 0 {
            j ^= bit;
            bit >>= 1;
        }
        j |= bit;
        if i < j {
            re.swap(i, j);
            im.swap(i, j);
        }
    }
    let sign = if inverse { 1.0 } else { -1.0 };
    let mut len = 2;
    while len <= n {
        let ang = sign * 2.0 * PI / len as f64;
        let (wr, wi) = (ang.cos(), ang.sin());
        for start in (0..n).step_by(len) {
            let (mut cr, mut ci) = (1.0, 0.0);
            for k in 0..len / 2 {
                let a = start + k;
                let b = a + len / 2;
                let tr = re[b] * cr - im[b] * ci;
                let ti = re[b] * ci + im[b] * cr;
                re[b] = re[a] - tr;
                im[b] = im[a] - ti;
                re[a] += tr;
                im[a] += ti;
                let ncr = cr * wr - ci * wi;
                ci = cr * wi + ci * wr;
                cr = ncr;
            }
        }
        len <<= 1;
    }
    if inverse {
        let s = 1.0 / n as f64;
        re.iter_mut().for_each(|v| *v *= s);
        im.iter_mut().for_each(|v| *v *= s);
    }
}

/// 2-D FFT of an `mx` x `my` array stored row-major (index `j * mx + i`), both powers of two.
pub fn fft2(re: &mut [f64], im: &mut [f64], mx: usize, my: usize, inverse: bool) {
    for j in 0..my {
        let r = j * mx..(j + 1) * mx;
        fft(&mut re[r.clone()], &mut im[r], inverse);
    }
    let mut cr = vec![0.0; my];
    let mut ci = vec![0.0; my];
    for i in 0..mx {
        for j in 0..my {
            cr[j] = re[j * mx + i];
            ci[j] = im[j * mx + i];
        }
        fft(&mut cr, &mut ci, inverse);
        for j in 0..my {
            re[j * mx + i] = cr[j];
            im[j * mx + i] = ci[j];
        }
    }
}

/// Multiplies the spectrum of a padded real field by a Gaussian transfer function of standard
/// deviation `sigma` (nodes).
fn gaussian_filter_padded(re: &mut [f64], mx: usize, my: usize, sigma: f64) {
    let mut im = vec![0.0; re.len()];
    fft2(re, &mut im, mx, my, false);
    let c = 2.0 * PI * PI * sigma * sigma;
    for j in 0..my {
        let ky = if j <= my / 2 {
            j as f64
        } else {
            j as f64 - my as f64
        } / my as f64;
        for i in 0..mx {
            let kx = if i <= mx / 2 {
                i as f64
            } else {
                i as f64 - mx as f64
            } / mx as f64;
            let h = (-c * (kx * kx + ky * ky)).exp();
            re[j * mx + i] *= h;
            im[j * mx + i] *= h;
        }
    }
    fft2(re, &mut im, mx, my, true);
}

fn padded_size(n: usize, pad: usize) -> usize {
    (n + pad).next_power_of_two()
}

/// A standardised Gaussian random field on an `nx` x `ny` grid with correlation length `corr`
/// (in nodes), covariance exp(-(r/corr)^2). A correlation length below 0.5 node gives white noise.
pub fn gaussian_field(nx: usize, ny: usize, corr: f64, rng: &mut StdRng) -> Vec<f64> {
    let sigma = 0.5 * corr;
    if sigma < 0.25 {
        let mut v: Vec<f64> = (0..nx * ny).map(|_| rng.sample(StandardNormal)).collect();
        standardise(&mut v);
        return v;
    }
    if sigma <= 4.0 {
        return gaussian_field_direct(nx, ny, sigma, rng);
    }
    let pad = (3.0 * sigma).ceil() as usize;
    let (mx, my) = (padded_size(nx, pad), padded_size(ny, pad));
    let mut re: Vec<f64> = (0..mx * my).map(|_| rng.sample(StandardNormal)).collect();
    gaussian_filter_padded(&mut re, mx, my, sigma);
    let mut out = Vec::with_capacity(nx * ny);
    for j in 0..ny {
        out.extend_from_slice(&re[j * mx..j * mx + nx]);
    }
    standardise(&mut out);
    out
}

/// Short correlation lengths: white noise convolved directly with a separable Gaussian kernel of
/// standard deviation `sigma` nodes (the same covariance as the spectral filter, cheaper when the
/// kernel is short).
fn gaussian_field_direct(nx: usize, ny: usize, sigma: f64, rng: &mut StdRng) -> Vec<f64> {
    let r = (3.0 * sigma).ceil() as usize;
    let kernel: Vec<f64> = (0..=2 * r)
        .map(|k| {
            let d = k as f64 - r as f64;
            (-0.5 * d * d / (sigma * sigma)).exp()
        })
        .collect();
    let (mx, my) = (nx + 2 * r, ny + 2 * r);
    let white: Vec<f64> = (0..mx * my).map(|_| rng.sample(StandardNormal)).collect();
    // along x: my rows of nx outputs
    let mut rows = vec![0.0; my * nx];
    for j in 0..my {
        let src = &white[j * mx..(j + 1) * mx];
        for i in 0..nx {
            rows[j * nx + i] = kernel.iter().zip(&src[i..]).map(|(k, v)| k * v).sum();
        }
    }
    let mut out = vec![0.0; nx * ny];
    for j in 0..ny {
        for (t, k) in kernel.iter().enumerate() {
            let src = &rows[(j + t) * nx..(j + t + 1) * nx];
            for (o, v) in out[j * nx..(j + 1) * nx].iter_mut().zip(src) {
                *o += k * v;
            }
        }
    }
    standardise(&mut out);
    out
}

/// Shifts and scales `v` in place to zero mean and unit standard deviation (left unscaled when
/// constant).
pub fn standardise(v: &mut [f64]) {
    let n = v.len() as f64;
    if n == 0.0 {
        return;
    }
    let mean = v.iter().sum::<f64>() / n;
    let sd = (v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / n).sqrt();
    for x in v.iter_mut() {
        *x -= mean;
        if sd > 0.0 {
            *x /= sd;
        }
    }
}

/// Gaussian smoothing (standard deviation `sigma` nodes) of an `nx` x `ny` map by normalised
/// convolution: the smoothed map divided by the smoothed indicator of the grid, so that the edges
/// are not pulled towards zero.
pub fn gaussian_smooth(values: &[f64], nx: usize, ny: usize, sigma: f64) -> Vec<f64> {
    if sigma < 0.25 {
        return values.to_vec();
    }
    let pad = (4.0 * sigma).ceil() as usize;
    let (mx, my) = (padded_size(nx, pad), padded_size(ny, pad));
    let mut data = vec![0.0; mx * my];
    let mut ones = vec![0.0; mx * my];
    for j in 0..ny {
        for i in 0..nx {
            data[j * mx + i] = values[j * nx + i];
            ones[j * mx + i] = 1.0;
        }
    }
    gaussian_filter_padded(&mut data, mx, my, sigma);
    gaussian_filter_padded(&mut ones, mx, my, sigma);
    let mut out = Vec::with_capacity(nx * ny);
    for j in 0..ny {
        for i in 0..nx {
            out.push(data[j * mx + i] / ones[j * mx + i].max(1e-12));
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::SeedableRng;

    #[test]
    fn fft_matches_direct_dft() {
        // definition of the discrete Fourier transform, X_k = sum x_n exp(-2 pi i k n / N)
        let x: Vec<f64> = (0..16).map(|i| ((i * 7 % 5) as f64) - 1.5).collect();
        let mut re = x.clone();
        let mut im = vec![0.0; 16];
        fft(&mut re, &mut im, false);
        for k in 0..16 {
            let (mut sr, mut si) = (0.0, 0.0);
            for (n, v) in x.iter().enumerate() {
                let a = -2.0 * PI * (k * n) as f64 / 16.0;
                sr += v * a.cos();
                si += v * a.sin();
            }
            assert!((sr - re[k]).abs() < 1e-9 && (si - im[k]).abs() < 1e-9);
        }
        fft(&mut re, &mut im, true);
        for (a, b) in re.iter().zip(&x) {
            assert!((a - b).abs() < 1e-12);
        }
    }

    #[test]
    fn field_correlation_falls_with_distance() {
        let mut rng = StdRng::seed_from_u64(3);
        let (nx, ny) = (128, 128);
        let f = gaussian_field(nx, ny, 8.0, &mut rng);
        let corr = |lag: usize| {
            let mut s = 0.0;
            let mut n = 0.0;
            for j in 0..ny {
                for i in 0..nx - lag {
                    s += f[j * nx + i] * f[j * nx + i + lag];
                    n += 1.0;
                }
            }
            s / n
        };
        // covariance exp(-(r/L)^2): 0.78 at L/2, 0.37 at L, 0.02 at 2L (sampling error ~0.1)
        assert!((corr(4) - (-0.25f64).exp()).abs() < 0.12, "{}", corr(4));
        assert!((corr(8) - (-1.0f64).exp()).abs() < 0.12, "{}", corr(8));
        assert!(corr(16).abs() < 0.12, "{}", corr(16));
    }
}
