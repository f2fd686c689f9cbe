//! Small statistics used by the monitor: robust location and scale, lag-1 autocorrelation and
//! the choice of block length, least-squares trends with standard errors and projections, the
//! asymptotic (Kern–Seaton) fouling fit, correlation, and a two-regressor fit.

use serde::Serialize;

/// Slices up to this length are selected in a stack buffer (the per-interval windows are
/// 3 to 30 long); longer ones are copied to the heap.
const STACK: usize = 64;

/// Median (NaN-free input).
pub fn median(v: &[f64]) -> f64 {
    if v.len() <= STACK {
        let mut buf = [0.0; STACK];
        let s = &mut buf[..v.len()];
        s.copy_from_slice(v);
        median_in_place(s)
    } else {
        median_in_place(&mut v.to_vec())
    }
}

/// Median of `s`, reordering it.
fn median_in_place(s: &mut [f64]) -> f64 {
    let n = s.len();
    if n == 0 {
        return f64::NAN;
    }
    // Selection, not a full sort (this runs on every interval).
    let (left, mid, _) = s.select_nth_unstable_by(n / 2, f64::total_cmp);
    let upper = *mid;
    if n % 2 == 1 {
        upper
    } else {
        let lower = left.iter().copied().max_by(f64::total_cmp).unwrap_or(upper);
        0.5 * (lower + upper)
    }
}

/// Robust σ: 1.4826 × median absolute deviation (consistent for normal data).
pub fn mad_sigma(v: &[f64]) -> f64 {
    let m = median(v);
    if v.len() <= STACK {
        let mut buf = [0.0; STACK];
        let dev = &mut buf[..v.len()];
        for (d, x) in dev.iter_mut().zip(v) {
            *d = (x - m).abs();
        }
        1.4826 * median_in_place(dev)
    } else {
        let mut dev: Vec<f64> = v.iter().map(|x| (x - m).abs()).collect();
        1.4826 * median_in_place(&mut dev)
    }
}

/// Mean.
pub fn mean(v: &[f64]) -> f64 {
    v.iter().sum::<f64>() / v.len() as f64
}

/// Sample standard deviation.
pub fn std_dev(v: &[f64]) -> f64 {
    if v.len() < 2 {
        return 0.0;
    }
    let m = mean(v);
    (v.iter().map(|x| (x - m).powi(2)).sum::<f64>() / (v.len() - 1) as f64).sqrt()
}

/// Lag-1 autocorrelation.
pub fn acf1(v: &[f64]) -> f64 {
    if v.len() < 3 {
        return 0.0;
    }
    let m = mean(v);
    let den: f64 = v.iter().map(|x| (x - m).powi(2)).sum();
    if den == 0.0 {
        return 0.0;
    }
    v.windows(2).map(|w| (w[0] - m) * (w[1] - m)).sum::<f64>() / den
}

/// Means of consecutive non-overlapping blocks of `b` values (a partial last block is dropped).
pub fn block_means(v: &[f64], b: usize) -> Vec<f64> {
    v.chunks_exact(b.max(1)).map(mean).collect()
}

/// The smallest block length among `candidates` whose block means have lag-1 autocorrelation
/// ≤ `max_acf` with at least `min_blocks` blocks (Runger & Willemain 1996 batch means).
/// Without such a candidate: the one with the smallest autocorrelation that still gives
/// `min_blocks` blocks (the caller inflates σ for what remains).
pub fn choose_block(v: &[f64], candidates: &[usize], max_acf: f64, min_blocks: usize) -> usize {
    let mut best: Option<(usize, f64)> = None;
    for &b in candidates {
        let m = block_means(v, b);
        if m.len() < min_blocks {
            continue;
        }
        let a = acf1(&m);
        if a <= max_acf {
            return b;
        }
        if best.is_none_or(|(_, x)| a < x) {
            best = Some((b, a));
        }
    }
    best.map_or_else(|| candidates.first().copied().unwrap_or(1), |(b, _)| b)
}

/// Pearson correlation.
pub fn correlation(x: &[f64], y: &[f64]) -> f64 {
    let n = x.len().min(y.len());
    if n < 3 {
        return 0.0;
    }
    let (mx, my) = (mean(&x[..n]), mean(&y[..n]));
    let sxy: f64 = x[..n].iter().zip(&y[..n]).map(|(a, b)| (a - mx) * (b - my)).sum();
    let sxx: f64 = x[..n].iter().map(|a| (a - mx).powi(2)).sum();
    let syy: f64 = y[..n].iter().map(|b| (b - my).powi(2)).sum();
    if sxx == 0.0 || syy == 0.0 { 0.0 } else { sxy / (sxx * syy).sqrt() }
}

/// A straight-line fit y = a + b·t with standard errors.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct LineFit {
    /// Intercept at t = 0.
    pub a: f64,
    /// Slope.
    pub b: f64,
    /// Standard error of the slope.
    pub se_b: f64,
    /// Residual variance.
    pub s2: f64,
    /// Points.
    pub n: usize,
    /// Mean of t.
    pub t_mean: f64,
    /// Σ (t − t̄)².
    pub stt: f64,
}

impl LineFit {
    /// Ordinary least squares.
    pub fn fit(t: &[f64], y: &[f64]) -> Option<LineFit> {
        let n = t.len().min(y.len());
        if n < 3 {
            return None;
        }
        let tm = mean(&t[..n]);
        let ym = mean(&y[..n]);
        let stt: f64 = t[..n].iter().map(|x| (x - tm).powi(2)).sum();
        if stt == 0.0 {
            return None;
        }
        let b = t[..n].iter().zip(&y[..n]).map(|(x, v)| (x - tm) * (v - ym)).sum::<f64>() / stt;
        let a = ym - b * tm;
        let sse: f64 = t[..n].iter().zip(&y[..n]).map(|(x, v)| (v - a - b * x).powi(2)).sum();
        let s2 = sse / (n - 2).max(1) as f64;
        Some(LineFit { a, b, se_b: (s2 / stt).sqrt(), s2, n, t_mean: tm, stt })
    }

    /// The slope's t-statistic.
    pub fn t_stat(&self) -> f64 {
        if self.se_b > 0.0 { self.b / self.se_b } else { f64::INFINITY * self.b.signum() }
    }

    /// Fitted value and its variance at t.
    pub fn predict(&self, t: f64) -> (f64, f64) {
        let y = self.a + self.b * t;
        let var = self.s2 * (1.0 / self.n as f64 + (t - self.t_mean).powi(2) / self.stt);
        (y, var)
    }

    /// When the line reaches `limit`, counted from `now`, with its standard deviation
    /// (delta method: Var(t*) ≈ [Var(ŷ_now) + t*²·Var(b̂)]/b̂²). `None` if it moves away.
    pub fn time_to(&self, limit: f64, now: f64) -> Option<(f64, f64)> {
        let (y_now, var_now) = self.predict(now);
        if self.b == 0.0 {
            return None;
        }
        let t_star = (limit - y_now) / self.b;
        if t_star < 0.0 {
            return if (limit - y_now) * self.b.signum() <= 0.0 { Some((0.0, 0.0)) } else { None };
        }
        let var = (var_now + t_star * t_star * self.se_b * self.se_b) / (self.b * self.b);
        Some((t_star, var.sqrt()))
    }
}

/// Asymptotic fouling (Kern & Seaton 1959), written for an effectiveness that falls:
/// y(t) = y0 − A·(1 − e^(−(t − t0)/tc)).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct AsymptoticFit {
    /// Value at the start.
    pub y0: f64,
    /// Total fall at infinite time.
    pub amplitude: f64,
    /// Time constant.
    pub tc: f64,
    /// Residual sum of squares.
    pub sse: f64,
}

impl AsymptoticFit {
    /// Fit by a grid search over `tc` with linear least squares for `y0` and `A`. Only time
    /// constants within the data span are tried (a longer one cannot be told from a line).
    pub fn fit(t: &[f64], y: &[f64]) -> Option<AsymptoticFit> {
        let n = t.len().min(y.len());
        if n < 5 {
            return None;
        }
        let t0 = t[0];
        let span = t[n - 1] - t0;
        if span <= 0.0 {
            return None;
        }
        let mut best: Option<AsymptoticFit> = None;
        for i in 1..=60 {
            let tc = span * f64::from(i) / 60.0;
            let g: Vec<f64> = t[..n].iter().map(|x| 1.0 - (-(x - t0) / tc).exp()).collect();
            // y = y0 − A·g: least squares in (y0, A).
            let gm = mean(&g);
            let ym = mean(&y[..n]);
            let sgg: f64 = g.iter().map(|v| (v - gm).powi(2)).sum();
            if sgg == 0.0 {
                continue;
            }
            let slope = g.iter().zip(&y[..n]).map(|(gv, yv)| (gv - gm) * (yv - ym)).sum::<f64>() / sgg;
            let y0 = ym - slope * gm;
            let amplitude = -slope;
            let sse: f64 = g.iter().zip(&y[..n]).map(|(gv, yv)| (yv - y0 + amplitude * gv).powi(2)).sum();
            if best.is_none_or(|b| sse < b.sse) {
                best = Some(AsymptoticFit { y0, amplitude, tc, sse });
            }
        }
        best
    }

    /// The value approached at infinite time.
    pub fn asymptote(&self) -> f64 {
        self.y0 - self.amplitude
    }
}

/// Fit of a centered response on two centered regressors (with intercept): coefficients and
/// their t-statistics, and the correlation of the regressors.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct TwoRegressors {
    /// Coefficient of the first regressor.
    pub b1: f64,
    /// Its t-statistic.
    pub t1: f64,
    /// Coefficient of the second regressor.
    pub b2: f64,
    /// Its t-statistic.
    pub t2: f64,
    /// Correlation of the two regressors.
    pub r12: f64,
}

impl TwoRegressors {
    /// y = c + b1·x1 + b2·x2 by least squares.
    pub fn fit(y: &[f64], x1: &[f64], x2: &[f64]) -> Option<TwoRegressors> {
        let n = y.len().min(x1.len()).min(x2.len());
        if n < 6 {
            return None;
        }
        let (my, m1, m2) = (mean(&y[..n]), mean(&x1[..n]), mean(&x2[..n]));
        let (mut s11, mut s22, mut s12, mut s1y, mut s2y) = (0.0, 0.0, 0.0, 0.0, 0.0);
        for i in 0..n {
            let (a, b, c) = (x1[i] - m1, x2[i] - m2, y[i] - my);
            s11 += a * a;
            s22 += b * b;
            s12 += a * b;
            s1y += a * c;
            s2y += b * c;
        }
        let det = s11 * s22 - s12 * s12;
        if det <= 0.0 || s11 == 0.0 || s22 == 0.0 {
            return None;
        }
        let b1 = (s22 * s1y - s12 * s2y) / det;
        let b2 = (s11 * s2y - s12 * s1y) / det;
        let sse: f64 = (0..n).map(|i| (y[i] - my - b1 * (x1[i] - m1) - b2 * (x2[i] - m2)).powi(2)).sum();
        let s2 = sse / (n - 3) as f64;
        let se1 = (s2 * s22 / det).sqrt();
        let se2 = (s2 * s11 / det).sqrt();
        let t = |b: f64, se: f64| if se > 0.0 { b / se } else { f64::INFINITY * b.signum() };
        Some(TwoRegressors { b1, t1: t(b1, se1), b2, t2: t(b2, se2), r12: s12 / (s11 * s22).sqrt() })
    }
}

/// Ordinary least squares of y on several regressors with an intercept: coefficients and
/// t-statistics (centered normal equations, Gaussian elimination). `None` when singular.
pub fn ols(y: &[f64], xs: &[&[f64]]) -> Option<(Vec<f64>, Vec<f64>)> {
    let k = xs.len();
    let n = xs.iter().map(|x| x.len()).min().unwrap_or(0).min(y.len());
    if n <= k + 2 || k == 0 {
        return None;
    }
    let my = mean(&y[..n]);
    let mx: Vec<f64> = xs.iter().map(|x| mean(&x[..n])).collect();
    let mut a = vec![vec![0.0; k]; k];
    let mut b = vec![0.0; k];
    for i in 0..n {
        let c: Vec<f64> = (0..k).map(|j| xs[j][i] - mx[j]).collect();
        for r in 0..k {
            b[r] += c[r] * (y[i] - my);
            for s in 0..k {
                a[r][s] += c[r] * c[s];
            }
        }
    }
    // Invert by solving for each unit vector (k is tiny).
    let mut inv = vec![vec![0.0; k]; k];
    for col in 0..k {
        let mut e = vec![0.0; k];
        e[col] = 1.0;
        let x = super::charts::solve_small(a.clone(), e)?;
        for row in 0..k {
            inv[row][col] = x[row];
        }
    }
    let coef: Vec<f64> = (0..k).map(|r| (0..k).map(|s| inv[r][s] * b[s]).sum()).collect();
    let sse: f64 = (0..n)
        .map(|i| {
            let fit: f64 = (0..k).map(|j| coef[j] * (xs[j][i] - mx[j])).sum();
            (y[i] - my - fit).powi(2)
        })
        .sum();
    let s2 = sse / (n - k - 1) as f64;
    let t = (0..k)
        .map(|j| {
            let se = (s2 * inv[j][j]).sqrt();
            if se > 0.0 { coef[j] / se } else { f64::INFINITY * coef[j].signum() }
        })
        .collect();
    Some((coef, t))
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;
    use crate::rng::Rng;

    #[test]
    fn robust_scale_of_normal_data() {
        let mut rng = Rng::new(11);
        let v: Vec<f64> = (0..20_000).map(|_| 3.0 + 2.0 * rng.normal()).collect();
        assert!((median(&v) - 3.0).abs() < 0.05);
        assert!((mad_sigma(&v) - 2.0).abs() < 0.05);
    }

    /// Median and MAD by selection, on the stack and on the heap, against the textbook
    /// definition on a sorted copy (middle value, or the mean of the two middle values).
    #[test]
    fn median_and_mad_match_the_sorted_definition() {
        let mut rng = Rng::new(3);
        let sorted_median = |v: &[f64]| {
            let mut s = v.to_vec();
            s.sort_by(f64::total_cmp);
            let n = s.len();
            if n % 2 == 1 { s[n / 2] } else { 0.5 * (s[n / 2 - 1] + s[n / 2]) }
        };
        for n in [1, 2, 3, 4, 10, 63, 64, 65, 200] {
            let v: Vec<f64> = (0..n).map(|_| rng.normal()).collect();
            let m = sorted_median(&v);
            assert_eq!(median(&v), m, "n = {n}");
            let dev: Vec<f64> = v.iter().map(|x| (x - m).abs()).collect();
            assert_eq!(mad_sigma(&v), 1.4826 * sorted_median(&dev), "n = {n}");
        }
        assert!(median(&[]).is_nan());
    }

    /// The exact lag-1 ACF of the block means of an AR(1) series with φ = 0.9 is
    /// 0.40 for b = 15 and 0.09 for b = 60; so the first b with ACF ≤ 0.2 among
    /// {5, 10, 15, 30, 60} is 60 (b = 30 gives 0.21). Monte Carlo here; tolerance 0.05.
    #[test]
    fn block_means_tame_autocorrelation() {
        let mut rng = Rng::new(5);
        let phi: f64 = 0.9;
        let mut x = 0.0;
        let v: Vec<f64> = (0..600_000)
            .map(|_| {
                x = phi * x + (1.0 - phi * phi).sqrt() * rng.normal();
                x
            })
            .collect();
        assert!((acf1(&block_means(&v, 15)) - 0.40).abs() < 0.05);
        assert!((acf1(&block_means(&v, 60)) - 0.09).abs() < 0.05);
        assert_eq!(choose_block(&v, &[5, 10, 15, 30, 60], 0.2, 50), 60);
    }

    #[test]
    fn line_fit_and_projection() {
        let t: Vec<f64> = (0..10).map(f64::from).collect();
        let y: Vec<f64> = t.iter().map(|x| 1.0 - 0.01 * x).collect();
        let f = LineFit::fit(&t, &y).unwrap();
        assert!((f.b + 0.01).abs() < 1e-12);
        let (dt, sd) = f.time_to(0.85, 9.0).unwrap();
        assert!((dt - 6.0).abs() < 1e-9 && sd < 1e-6);
    }

    #[test]
    fn kern_seaton_fit_finds_the_asymptote() {
        let t: Vec<f64> = (0..40).map(|i| f64::from(i) * 0.5).collect();
        let y: Vec<f64> = t.iter().map(|x| 1.0 - 0.06 * (1.0 - (-x / 5.0).exp())).collect();
        let f = AsymptoticFit::fit(&t, &y).unwrap();
        assert!((f.asymptote() - 0.94).abs() < 0.003, "{f:?}");
    }

    #[test]
    fn two_regressors_separate_independent_causes() {
        let mut rng = Rng::new(9);
        let x1: Vec<f64> = (0..200).map(|_| 100.0 + 10.0 * rng.normal()).collect();
        let x2: Vec<f64> = (0..200).map(|_| 3.0 + 0.3 * rng.normal()).collect();
        let y: Vec<f64> = x1.iter().map(|q| -0.05 * q + 0.1 * rng.normal()).collect();
        let f = TwoRegressors::fit(&y, &x1, &x2).unwrap();
        assert!(f.t1.abs() > 10.0 && f.t2.abs() < 3.0, "{f:?}");
    }
}
