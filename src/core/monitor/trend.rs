//! The heater-effectiveness trend: block effectiveness averaged into points `trend_point_ms`
//! apart, a straight line through them (or the Kern–Seaton asymptotic curve when it fits much
//! better and has levelled off), and the projected date the cleaning limit is reached.

use serde::{Deserialize, Serialize};

use super::settings::MonitorConfig;
use super::stats::{AsymptoticFit, LineFit};

/// A fitted effectiveness trend with its projection.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Trend {
    /// Slope per day (fraction of effectiveness per day).
    pub slope_per_day: f64,
    /// Its t-statistic.
    pub t: f64,
    /// `linear` or `asymptotic`.
    pub model: String,
    /// Fitted effectiveness now.
    pub now: f64,
    /// Projected time the limit is reached, ms (None: not expected).
    pub limit_ms: Option<i64>,
    /// Earliest and latest projected times (±2 σ), ms.
    pub range_ms: Option<(i64, i64)>,
    /// Points (time ms, effectiveness) the fit used.
    pub points: Vec<(i64, f64)>,
    /// Asymptote of the Kern–Seaton fit, when chosen.
    pub asymptote: Option<f64>,
}

const DAY_MS: f64 = 86_400_000.0;

/// Effectiveness trend on points spaced `trend_point_ms` over the trend window, from a day
/// before the current episode began (the decline, not the flat baseline before it). `blocks`
/// are the (end, effectiveness) of the blocks kept, oldest first.
pub(super) fn fit_trend(
    cfg: &MonitorConfig,
    now: i64,
    episode_ms: Option<i64>,
    blocks: impl IntoIterator<Item = (i64, Option<f64>)>,
) -> Option<Trend> {
    let since =
        episode_ms.map_or(now - cfg.trend_window_ms, |e| (e - 86_400_000).max(now - cfg.trend_window_ms));
    let points = points(cfg.trend_point_ms, blocks.into_iter().filter(|(end_ms, _)| *end_ms > since));
    if points.len() < 6 {
        return None;
    }
    let t: Vec<f64> = points.iter().map(|p| p.0 as f64 / DAY_MS).collect();
    let y: Vec<f64> = points.iter().map(|p| p.1).collect();
    let line = LineFit::fit(&t, &y)?;
    let now_d = now as f64 / DAY_MS;
    let mut trend = Trend {
        slope_per_day: line.b,
        t: line.t_stat(),
        model: "linear".into(),
        now: line.predict(now_d).0,
        limit_ms: None,
        range_ms: None,
        points: points.clone(),
        asymptote: None,
    };
    // Prefer the asymptotic model when it fits much better and has levelled off within
    // the data (Kern & Seaton 1959; before ~one time constant it cannot be told from a line).
    let sse_line = line.s2 * (line.n - 2) as f64;
    if let Some(a) = AsymptoticFit::fit(&t, &y) {
        let span = t[t.len() - 1] - t[0];
        if a.sse < 0.5 * sse_line && a.tc < 0.6 * span && a.amplitude > 0.0 {
            trend.model = "asymptotic".into();
            trend.asymptote = Some(a.asymptote());
            if a.asymptote() > cfg.effectiveness_limit {
                return Some(trend);
            }
        }
    }
    project(cfg, &line, now, &mut trend);
    Some(trend)
}

/// The mean effectiveness of the blocks in each slot of `point_ms`, stamped at the slot's
/// end, in time order (blocks without an effectiveness are skipped).
fn points(point_ms: i64, blocks: impl Iterator<Item = (i64, Option<f64>)>) -> Vec<(i64, f64)> {
    let mut points: Vec<(i64, f64)> = Vec::new();
    let mut cur: Option<(i64, f64, usize)> = None;
    for (end_ms, eff) in blocks {
        let Some(e) = eff else { continue };
        let slot = end_ms.div_euclid(point_ms);
        match &mut cur {
            Some((s, sum, n)) if *s == slot => {
                *sum += e;
                *n += 1;
            }
            _ => {
                if let Some((s, sum, n)) = cur.take() {
                    points.push(((s + 1) * point_ms, sum / n as f64));
                }
                cur = Some((slot, e, 1));
            }
        }
    }
    if let Some((s, sum, n)) = cur {
        points.push(((s + 1) * point_ms, sum / n as f64));
    }
    points
}

/// When a significant decline reaches the cleaning limit along the line, with its ±2 σ range.
fn project(cfg: &MonitorConfig, line: &LineFit, now: i64, trend: &mut Trend) {
    let now_d = now as f64 / DAY_MS;
    if line.b < 0.0
        && trend.t.abs() >= cfg.trend_t_min
        && let Some((dt, sd)) = line.time_to(cfg.effectiveness_limit, now_d)
    {
        let at = now + (dt * DAY_MS) as i64;
        trend.limit_ms = Some(at);
        let lo = now + ((dt - 2.0 * sd).max(0.0) * DAY_MS) as i64;
        let hi = now + ((dt + 2.0 * sd) * DAY_MS) as i64;
        trend.range_ms = Some((lo, hi));
    }
}
