//! Control charts on a standardized statistic and their design for calendar time.
//!
//! * Tabular two-sided CUSUM (Page 1954) with the fast-initial-response head start of Lucas &
//!   Crosier (1982) and the shift and change-point estimates of Montgomery (ISQC ch. 9).
//! * EWMA (Roberts 1959) with exact time-varying limits (Lucas & Saccucci 1990).
//! * Average run lengths: CUSUM by Nyström quadrature of the Page integral equation, EWMA by the
//!   Brook–Evans Markov chain, and designs (`h`, `L`) for a target in-control ARL by bisection.
//!
//! Pure functions and small state machines; the state serializes into the checkpoint.

use serde::{Deserialize, Serialize};

/// Standard normal density.
fn phi(x: f64) -> f64 {
    (-0.5 * x * x).exp() / (2.0 * std::f64::consts::PI).sqrt()
}

/// Standard normal distribution function.
pub fn normal_cdf(x: f64) -> f64 {
    0.5 * erfc(-x / std::f64::consts::SQRT_2)
}

/// Complementary error function: the Maclaurin series of erf below 3, the continued fraction
/// of erfc (evaluated by the modified Lentz method) above; relative error below 1e-12.
fn erfc(x: f64) -> f64 {
    let z = x.abs();
    let v = if z < 3.0 { 1.0 - erf_series(z) } else { erfc_cf(z) };
    if x >= 0.0 { v } else { 2.0 - v }
}

/// erfc(x) for x ≥ 3 by the continued fraction erfc(x) = exp(-x²)/√π · 1/(x + 1/2/(x + 1/(x + 3/2/(x + ...)))).
fn erfc_cf(x: f64) -> f64 {
    let tiny = 1e-300;
    let mut f = x;
    let mut c = x;
    let mut d = 0.0;
    for n in 1..300 {
        let a = n as f64 / 2.0;
        d = x + a * d;
        d = if d.abs() < tiny { tiny } else { d };
        c = x + a / c;
        c = if c.abs() < tiny { tiny } else { c };
        d = 1.0 / d;
        let delta = c * d;
        f *= delta;
        if (delta - 1.0).abs() < 1e-16 {
            break;
        }
    }
    (-x * x).exp() / std::f64::consts::PI.sqrt() / f
}

/// erf by its Maclaurin series (converges quickly for |x| < 2).
fn erf_series(x: f64) -> f64 {
    let mut sum = x;
    let mut term = x;
    let x2 = x * x;
    let mut n = 0.0;
    loop {
        n += 1.0;
        term *= -x2 / n;
        let add = term / (2.0 * n + 1.0);
        sum += add;
        if add.abs() < 1e-17 * sum.abs() {
            break;
        }
        if n > 200.0 {
            break;
        }
    }
    2.0 / std::f64::consts::PI.sqrt() * sum
}

/// Gauss–Legendre nodes and weights on [-1, 1] (Golub–Welsch-free Newton iteration).
fn gauss_legendre(n: usize) -> (Vec<f64>, Vec<f64>) {
    let mut x = vec![0.0; n];
    let mut w = vec![0.0; n];
    let m = n.div_ceil(2);
    for i in 0..m {
        let mut z = (std::f64::consts::PI * (i as f64 + 0.75) / (n as f64 + 0.5)).cos();
        let mut pp = 0.0;
        for _ in 0..100 {
            let (mut p1, mut p2) = (1.0, 0.0);
            for j in 0..n {
                let p3 = p2;
                p2 = p1;
                p1 = ((2 * j + 1) as f64 * z * p2 - j as f64 * p3) / (j + 1) as f64;
            }
            pp = n as f64 * (z * p1 - p2) / (z * z - 1.0);
            let z1 = z;
            z = z1 - p1 / pp;
            if (z - z1).abs() < 1e-15 {
                break;
            }
        }
        x[i] = -z;
        x[n - 1 - i] = z;
        w[i] = 2.0 / ((1.0 - z * z) * pp * pp);
        w[n - 1 - i] = w[i];
    }
    (x, w)
}

/// Solve a dense linear system in place (Gaussian elimination with partial pivoting).
fn solve_linear(mut a: Vec<Vec<f64>>, mut b: Vec<f64>) -> Option<Vec<f64>> {
    let n = b.len();
    for col in 0..n {
        let piv = (col..n).max_by(|&i, &j| a[i][col].abs().total_cmp(&a[j][col].abs()))?;
        if a[piv][col].abs() < 1e-300 {
            return None;
        }
        a.swap(col, piv);
        b.swap(col, piv);
        for row in col + 1..n {
            let f = a[row][col] / a[col][col];
            if f != 0.0 {
                // The pivot row borrowed beside the row it reduces (no copy per row).
                let (above, below) = a.split_at_mut(row);
                for (x, p) in below[0][col..n].iter_mut().zip(&above[col][col..n]) {
                    *x -= f * p;
                }
                b[row] -= f * b[col];
            }
        }
    }
    let mut x = vec![0.0; n];
    for row in (0..n).rev() {
        let s: f64 = (row + 1..n).map(|k| a[row][k] * x[k]).sum();
        x[row] = (b[row] - s) / a[row][row];
    }
    Some(x)
}

/// Solve a small dense linear system (for regressions).
pub fn solve_small(a: Vec<Vec<f64>>, b: Vec<f64>) -> Option<Vec<f64>> {
    solve_linear(a, b)
}

/// One-sided upper CUSUM ARL for a mean shift `delta` (σ units), starting at `start`:
/// Page's integral equation solved by Nyström quadrature with `nodes` Gauss–Legendre nodes
/// plus the atom at zero (Brook & Evans; Montgomery's tables).
pub fn cusum_arl_one_sided(k: f64, h: f64, delta: f64, start: f64, nodes: usize) -> f64 {
    let (gx, gw) = gauss_legendre(nodes);
    // Nodes on (0, h).
    let y: Vec<f64> = gx.iter().map(|x| 0.5 * h * (x + 1.0)).collect();
    let w: Vec<f64> = gw.iter().map(|v| 0.5 * h * v).collect();
    // Unknowns: L(0), L(y_1..y_n).
    let pts: Vec<f64> = std::iter::once(0.0).chain(y.iter().copied()).collect();
    let n = pts.len();
    let mut a = vec![vec![0.0; n]; n];
    let b = vec![1.0; n];
    for (i, &s) in pts.iter().enumerate() {
        a[i][i] += 1.0;
        // Atom: next value 0 when z <= k - s, i.e. with probability Φ(k - s - δ).
        a[i][0] -= normal_cdf(k - s - delta);
        for (j, (&yj, &wj)) in y.iter().zip(&w).enumerate() {
            a[i][j + 1] -= wj * phi(yj + k - s - delta);
        }
    }
    let Some(l) = solve_linear(a, b) else { return f64::NAN };
    if start == 0.0 {
        return l[0];
    }
    // Nyström interpolation at the start point.
    1.0 + normal_cdf(k - start - delta) * l[0]
        + y.iter()
            .zip(&w)
            .enumerate()
            .map(|(j, (&yj, &wj))| wj * phi(yj + k - start - delta) * l[j + 1])
            .sum::<f64>()
}

/// Two-sided CUSUM ARL (`1/ARL = 1/ARL+ + 1/ARL−`).
pub fn cusum_arl(k: f64, h: f64, delta: f64, head_start: f64) -> f64 {
    let up = cusum_arl_one_sided(k, h, delta, head_start, 96);
    let down = cusum_arl_one_sided(k, h, -delta, head_start, 96);
    1.0 / (1.0 / up + 1.0 / down)
}

/// Two-sided EWMA ARL by the Brook–Evans Markov chain (`states` states between the asymptotic
/// limits, start at 0).
pub fn ewma_arl(lambda: f64, l: f64, delta: f64, states: usize) -> f64 {
    let limit = l * (lambda / (2.0 - lambda)).sqrt();
    let m = states;
    let width = 2.0 * limit / m as f64;
    let centers: Vec<f64> = (0..m).map(|i| -limit + (i as f64 + 0.5) * width).collect();
    // Φ beyond ±9 differs from 0 or 1 by less than 1e-18: no need to evaluate it there.
    let cdf = |x: f64| {
        if x <= -9.0 {
            0.0
        } else if x >= 9.0 {
            1.0
        } else {
            normal_cdf(x)
        }
    };
    let mut a = vec![vec![0.0; m]; m];
    let mut edges = vec![0.0; m + 1];
    for i in 0..m {
        let base = (1.0 - lambda) * centers[i];
        // z = (w' - (1-λ) w)/λ at each cell edge w' (cell j spans edges j..j+1).
        for (k, e) in edges.iter_mut().enumerate() {
            *e = cdf((-limit + k as f64 * width - base) / lambda - delta);
        }
        for j in 0..m {
            let p = edges[j + 1] - edges[j];
            a[i][j] = if i == j { 1.0 - p } else { -p };
        }
    }
    let Some(l) = solve_linear(a, vec![1.0; m]) else { return f64::NAN };
    // Start at w = 0: the middle state (odd count) or the mean of the two middle ones.
    if m % 2 == 1 { l[m / 2] } else { 0.5 * (l[m / 2 - 1] + l[m / 2]) }
}

/// Chart limits already sized in this process, by (chart, parameter, ARL0): sizing an EWMA
/// takes a Markov-chain solve per bisection step (tens of milliseconds), and every unit and
/// every re-learned baseline asks for the same few values.
fn sized(chart: u8, p: f64, arl0: f64, compute: impl FnOnce() -> f64) -> f64 {
    use std::collections::HashMap;
    use std::sync::{Mutex, OnceLock};
    /// (chart, parameter bits, ARL0 bits) → limit.
    type Sized = HashMap<(u8, u64, u64), f64>;
    static CACHE: OnceLock<Mutex<Sized>> = OnceLock::new();
    let key = (chart, p.to_bits(), arl0.to_bits());
    let cache = CACHE.get_or_init(|| Mutex::new(HashMap::new()));
    if let Some(v) = cache.lock().ok().and_then(|c| c.get(&key).copied()) {
        return v;
    }
    let v = compute();
    if let Ok(mut c) = cache.lock() {
        c.insert(key, v);
    }
    v
}

/// The CUSUM decision interval `h` (for reference value `k`) that gives an in-control ARL of
/// `arl0`, by bisection.
pub fn cusum_h_for(k: f64, arl0: f64) -> f64 {
    sized(0, k, arl0, || cusum_h_bisect(k, arl0))
}

fn cusum_h_bisect(k: f64, arl0: f64) -> f64 {
    let (mut lo, mut hi) = (0.5, 20.0);
    // 24 halvings: h to within 1.2e-6, far below what matters for an ARL.
    for _ in 0..24 {
        let mid = 0.5 * (lo + hi);
        if cusum_arl(k, mid, 0.0, 0.0) < arl0 {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

/// The EWMA limit width `L` that gives an in-control ARL of `arl0`, by bisection.
pub fn ewma_l_for(lambda: f64, arl0: f64) -> f64 {
    sized(1, lambda, arl0, || ewma_l_search(lambda, arl0))
}

fn ewma_l_search(lambda: f64, arl0: f64) -> f64 {
    // ln ARL0 is smooth and monotone in L: Brent's method needs far fewer Markov-chain solves
    // than bisection for the same 1e-6 in L. Bisection stays as the fallback.
    let mut f = |l: f64| ewma_arl(lambda, l, 0.0, 151).ln() - arl0.ln();
    let mut conv = roots::SimpleConvergency { eps: 1e-7, max_iter: 60 };
    if let Ok(l) = roots::find_root_brent(1.0, 6.0, &mut f, &mut conv) {
        return l;
    }
    let (mut lo, mut hi) = (1.0, 6.0);
    // 22 halvings: L to within 1.2e-6.
    for _ in 0..22 {
        let mid = 0.5 * (lo + hi);
        if ewma_arl(lambda, mid, 0.0, 151) < arl0 {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

/// Tabular two-sided CUSUM on a standardized statistic.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Cusum {
    /// Reference value (half the shift to detect fastest), σ units.
    pub k: f64,
    /// Decision interval, σ units.
    pub h: f64,
    /// Upper sum.
    pub up: f64,
    /// Lower sum.
    pub down: f64,
    /// Samples since the upper sum was last zero.
    pub n_up: u32,
    /// Samples since the lower sum was last zero.
    pub n_down: u32,
}

/// Which side of a chart signalled.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Side {
    /// Upward shift.
    Up,
    /// Downward shift.
    Down,
}

impl Cusum {
    /// A fresh chart.
    pub fn new(k: f64, h: f64) -> Cusum {
        Cusum { k, h, up: 0.0, down: 0.0, n_up: 0, n_down: 0 }
    }

    /// Restart with the fast-initial-response head start `h/2`.
    pub fn restart_fir(&mut self) {
        self.up = self.h / 2.0;
        self.down = self.h / 2.0;
        self.n_up = 0;
        self.n_down = 0;
    }

    /// Add a standardized value; returns the side that signals, if any.
    pub fn step(&mut self, z: f64) -> Option<Side> {
        self.up = (self.up + z - self.k).max(0.0);
        self.down = (self.down - z - self.k).max(0.0);
        self.n_up = if self.up > 0.0 { self.n_up + 1 } else { 0 };
        self.n_down = if self.down > 0.0 { self.n_down + 1 } else { 0 };
        if self.up > self.h {
            Some(Side::Up)
        } else if self.down > self.h {
            Some(Side::Down)
        } else {
            None
        }
    }

    /// Estimated shift (σ units) and samples since the change, for the side given
    /// (Montgomery: μ̂ = μ0 + σ0·(k + C/N)).
    pub fn estimate(&self, side: Side) -> (f64, u32) {
        match side {
            Side::Up => (self.k + self.up / f64::from(self.n_up.max(1)), self.n_up),
            Side::Down => (-(self.k + self.down / f64::from(self.n_down.max(1))), self.n_down),
        }
    }

    /// Reset both sums to zero.
    pub fn reset(&mut self) {
        *self = Cusum::new(self.k, self.h);
    }
}

/// EWMA of a standardized statistic with exact limits.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Ewma {
    /// Smoothing constant.
    pub lambda: f64,
    /// Limit width.
    pub l: f64,
    /// Current value.
    pub w: f64,
    /// Samples since start (for the exact limits).
    pub t: u32,
}

impl Ewma {
    /// A fresh chart.
    pub fn new(lambda: f64, l: f64) -> Ewma {
        Ewma { lambda, l, w: 0.0, t: 0 }
    }

    /// Current limit (exact, growing to the asymptote).
    pub fn limit(&self) -> f64 {
        let t = f64::from(self.t.max(1));
        self.l * (self.lambda / (2.0 - self.lambda) * (1.0 - (1.0 - self.lambda).powf(2.0 * t))).sqrt()
    }

    /// Add a standardized value; returns the side that signals, if any.
    pub fn step(&mut self, z: f64) -> Option<Side> {
        self.t = self.t.saturating_add(1);
        self.w = self.lambda * z + (1.0 - self.lambda) * self.w;
        let lim = self.limit();
        if self.w > lim {
            Some(Side::Up)
        } else if self.w < -lim {
            Some(Side::Down)
        } else {
            None
        }
    }

    /// Reset.
    pub fn reset(&mut self) {
        *self = Ewma::new(self.lambda, self.l);
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    fn within(got: f64, want: f64, rel: f64) -> bool {
        (got / want - 1.0).abs() <= rel
    }

    #[test]
    fn normal_cdf_values() {
        // Source: standard normal table (e.g. Abramowitz & Stegun table 26.1).
        assert!((normal_cdf(0.0) - 0.5).abs() < 1e-15);
        assert!((normal_cdf(1.96) - 0.975_002_104_851_78).abs() < 1e-10);
        assert!((normal_cdf(-3.0) - 0.001_349_898_031_630_1).abs() < 1e-10);
    }

    /// Source: Montgomery, Introduction to Statistical Quality Control, CUSUM ARL table: k = 0.5,
    /// h = 5: ARL0 = 465, ARL(1σ) = 10.4; h = 4: 168 and 8.38 (to two decimals 465.44, 10.38,
    /// 167.68, 8.38; tolerance 0.5 %).
    #[test]
    fn cusum_arl_check_values() {
        assert!(within(cusum_arl(0.5, 5.0, 0.0, 0.0), 465.44, 0.005), "{}", cusum_arl(0.5, 5.0, 0.0, 0.0));
        assert!(within(cusum_arl(0.5, 5.0, 1.0, 0.0), 10.38, 0.005));
        assert!(within(cusum_arl(0.5, 5.0, 0.5, 0.0), 38.00, 0.005));
        assert!(within(cusum_arl(0.5, 5.0, 2.0, 0.0), 4.01, 0.005));
        assert!(within(cusum_arl(0.5, 4.0, 0.0, 0.0), 167.68, 0.005));
        assert!(within(cusum_arl(0.5, 4.0, 1.0, 0.0), 8.38, 0.005));
        // FIR head start h/2 (Lucas & Crosier 1982): 448 and 6.35.
        assert!(within(cusum_arl(0.5, 5.0, 0.0, 2.5), 448.0, 0.01));
        assert!(within(cusum_arl(0.5, 5.0, 1.0, 2.5), 6.35, 0.01));
    }

    /// Source: Lucas & Saccucci (1990) as reproduced in Montgomery:
    /// λ = 0.1, L = 2.814: ARL0 = 500 (499.6), ARL(1σ) = 10.3.
    #[test]
    fn ewma_arl_check_values() {
        assert!(within(ewma_arl(0.1, 2.814, 0.0, 801), 499.6, 0.005), "{}", ewma_arl(0.1, 2.814, 0.0, 801));
        assert!(within(ewma_arl(0.1, 2.814, 1.0, 801), 10.3, 0.01));
    }

    /// Designs for calendar time (30 days of 10-minute blocks): ARL0 = 4320 blocks gives h = 7.21
    /// (k = 0.5) and L = 3.515 (λ = 0.1).
    #[test]
    fn designs_for_a_target_arl() {
        assert!((cusum_h_for(0.5, 4320.0) - 7.21).abs() < 0.02, "{}", cusum_h_for(0.5, 4320.0));
        assert!((ewma_l_for(0.1, 4320.0) - 3.515).abs() < 0.02, "{}", ewma_l_for(0.1, 4320.0));
    }

    #[test]
    fn cusum_signals_and_estimates_the_shift() {
        let mut c = Cusum::new(0.5, 5.0);
        let mut n = 0;
        let side = loop {
            n += 1;
            if let Some(s) = c.step(2.0) {
                break s;
            }
        };
        assert_eq!((side, n), (Side::Up, 4));
        let (shift, since) = c.estimate(Side::Up);
        assert!((shift - 2.0).abs() < 1e-12 && since == 4);
        let mut e = Ewma::new(0.1, 2.814);
        assert!(e.step(0.0).is_none());
        assert!((e.limit() - 2.814 * 0.1).abs() < 1e-12, "first limit is L·λ");
    }
}
