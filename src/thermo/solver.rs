//! One-dimensional root finding for increasing functions: Newton's method on the analytic
//! derivative, safeguarded by a bracket, with Brent's method from the `roots` crate as the
//! fallback. Pure and allocation-free.

use roots::{Convergency, SearchError, find_root_brent};

/// Which method produced the root.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Method {
    /// Newton's method converged.
    Newton,
    /// Newton failed; Brent's method on the bracket converged.
    Brent,
}

/// A root and how it was found.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Root {
    /// The root.
    pub x: f64,
    /// Function evaluations used.
    pub evaluations: usize,
    /// Method.
    pub method: Method,
}

/// Why no root was found.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum RootError {
    /// The function has the same sign at both ends of the search range.
    #[error("no root between {lo} and {hi} (residual {f_lo:.6e} at {lo}, {f_hi:.6e} at {hi})")]
    NoBracket {
        /// Lower end.
        lo: f64,
        /// Upper end.
        hi: f64,
        /// Residual at `lo`.
        f_lo: f64,
        /// Residual at `hi`.
        f_hi: f64,
    },
    /// Brent's method ran out of iterations.
    #[error("no convergence after {iterations} iterations (last estimate {last})")]
    NoConvergence {
        /// Iterations used.
        iterations: usize,
        /// Last estimate.
        last: f64,
    },
    /// The function is not finite at a point.
    #[error("the residual is not finite at {at}")]
    NotFinite {
        /// The point.
        at: f64,
    },
}

/// Tolerances: stop when a step is below `xtol` or the residual below `ftol` in magnitude.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Tolerance {
    /// Absolute tolerance on x.
    pub xtol: f64,
    /// Absolute tolerance on the residual.
    pub ftol: f64,
    /// Newton iteration limit before falling back.
    pub max_newton: usize,
    /// Brent iteration limit.
    pub max_brent: usize,
}

impl Default for Tolerance {
    fn default() -> Self {
        Tolerance { xtol: 1e-10, ftol: 0.0, max_newton: 40, max_brent: 200 }
    }
}

struct Conv {
    xtol: f64,
    ftol: f64,
    max_iter: usize,
}

impl Convergency<f64> for Conv {
    fn is_root_found(&mut self, y: f64) -> bool {
        y.abs() <= self.ftol
    }
    fn is_converged(&mut self, x1: f64, x2: f64) -> bool {
        (x1 - x2).abs() <= self.xtol
    }
    fn is_iteration_limit_reached(&mut self, iter: usize) -> bool {
        iter >= self.max_iter
    }
}

/// Subintervals of the scan for a rising crossing when the ends of the range do not bracket one.
const SCAN_STEPS: usize = 400;

/// Find the root of an increasing function `f` (returning value and derivative) in
/// `[lo, hi]`, starting Newton's method at `guess`.
pub fn newton_brent<F>(mut f: F, guess: f64, lo: f64, hi: f64, tol: Tolerance) -> Result<Root, RootError>
where
    F: FnMut(f64) -> (f64, f64),
{
    let mut evaluations = 0usize;
    // Known bracket from sign information gathered during Newton's steps.
    let (mut b_lo, mut b_hi) = (lo, hi);
    let mut x = guess.clamp(lo, hi);
    for _ in 0..tol.max_newton {
        let (fx, dfx) = f(x);
        evaluations += 1;
        if !fx.is_finite() || !dfx.is_finite() {
            break;
        }
        if fx == 0.0 {
            return Ok(Root { x, evaluations, method: Method::Newton });
        }
        if fx > 0.0 {
            b_hi = b_hi.min(x);
        } else {
            b_lo = b_lo.max(x);
        }
        if dfx <= 0.0 {
            break;
        }
        let step = fx / dfx;
        let next = x - step;
        if !(next >= b_lo && next <= b_hi) {
            break;
        }
        if step.abs() <= tol.xtol || fx.abs() <= tol.ftol {
            return Ok(Root { x: next, evaluations, method: Method::Newton });
        }
        x = next;
    }
    // Fallback: Brent on the tightest known bracket.
    let mut value = |x: f64| {
        evaluations += 1;
        f(x).0
    };
    let f_lo = value(b_lo);
    let f_hi = value(b_hi);
    if !f_lo.is_finite() {
        return Err(RootError::NotFinite { at: b_lo });
    }
    if !f_hi.is_finite() {
        return Err(RootError::NotFinite { at: b_hi });
    }
    if f_lo == 0.0 {
        return Ok(Root { x: b_lo, evaluations, method: Method::Brent });
    }
    if f_hi == 0.0 {
        return Ok(Root { x: b_hi, evaluations, method: Method::Brent });
    }
    if f_lo.signum() == f_hi.signum() {
        // Not increasing over the whole range (a correlation extrapolated far beyond its
        // range can bend back): take the lowest rising crossing on a scan of the range.
        let f_lo0 = value(lo);
        let f_hi0 = value(hi);
        let mut a = (lo, f_lo0);
        let mut crossing = None;
        for k in 1..=SCAN_STEPS {
            let x = lo + (hi - lo) * k as f64 / SCAN_STEPS as f64;
            let fx = if k == SCAN_STEPS { f_hi0 } else { value(x) };
            if !fx.is_finite() {
                break;
            }
            if a.1 < 0.0 && fx >= 0.0 {
                crossing = Some((a.0, x));
                break;
            }
            a = (x, fx);
        }
        match crossing {
            Some((x0, x1)) => (b_lo, b_hi) = (x0, x1),
            // Report the caller's range (the tightened one could mislead).
            None => return Err(RootError::NoBracket { lo, hi, f_lo: f_lo0, f_hi: f_hi0 }),
        }
    }
    let mut conv = Conv { xtol: tol.xtol, ftol: tol.ftol, max_iter: tol.max_brent };
    match find_root_brent(b_lo, b_hi, &mut value, &mut conv) {
        Ok(x) => Ok(Root { x, evaluations, method: Method::Brent }),
        Err(SearchError::NoBracketing) => Err(RootError::NoBracket { lo: b_lo, hi: b_hi, f_lo, f_hi }),
        Err(_) => Err(RootError::NoConvergence { iterations: tol.max_brent, last: (b_lo + b_hi) / 2.0 }),
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    #[test]
    fn newton_converges_quadratically() {
        let r =
            newton_brent(|x| (x * x * x - 8.0, 3.0 * x * x), 3.0, 0.5, 10.0, Tolerance::default()).unwrap();
        assert!((r.x - 2.0).abs() < 1e-12);
        assert_eq!(r.method, Method::Newton);
        assert!(r.evaluations < 10);
    }

    #[test]
    fn falls_back_to_brent_on_bad_derivative() {
        // A derivative that lies (zero) forces the fallback.
        let r = newton_brent(|x| (x - 1.5, 0.0), 3.0, 0.0, 10.0, Tolerance::default()).unwrap();
        assert_eq!(r.method, Method::Brent);
        assert!((r.x - 1.5).abs() < 1e-9);
    }

    #[test]
    fn finds_the_lowest_rising_crossing_of_a_function_that_bends_back() {
        // Rises through zero at 2, peaks at 4, falls below zero again after 6: both ends of
        // [0, 10] are negative, yet the lowest rising crossing is the physical root.
        let f = |x: f64| (-(x - 2.0) * (x - 6.0), -2.0 * x + 8.0);
        let r = newton_brent(f, 9.0, 0.0, 10.0, Tolerance::default()).unwrap();
        assert_eq!(r.method, Method::Brent);
        assert!((r.x - 2.0).abs() < 1e-9, "{r:?}");
    }

    #[test]
    fn reports_missing_bracket() {
        let e = newton_brent(|x| (x + 100.0, 1.0), 3.0, 0.0, 10.0, Tolerance::default()).unwrap_err();
        assert!(matches!(e, RootError::NoBracket { .. }), "{e:?}");
    }
}
