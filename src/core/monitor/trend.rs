//! The heater-effectiveness trend: block effectiveness averaged into points `trend_point_ms`
//! apart, a straight line through them (or the Kern–Seaton asymptotic curve when it fits much
//! better and has levelled off), and the projected date the cleaning limit is reached.

use serde::{Deserialize, Serialize};

use super::settings::MonitorConfig;
use super::stats::{AsymptoticFit, LineFit};

/// The model of an effectiveness trend.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum TrendModel {
    /// A straight line.
    Linear,
    /// Fouling that levels off towards an asymptote (Kern–Seaton).
    Asymptotic,
}

impl TrendModel {
    /// The name used in messages and evidence.
    pub fn as_str(self) -> &'static str {
        match self {
            TrendModel::Linear => "linear",
            TrendModel::Asymptotic => "asymptotic",
        }
    }
}

impl std::fmt::Display for TrendModel {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// A fitted effectiveness trend with its projection.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Trend {
    /// Slope per day (fraction of effectiveness per day).
    pub slope_per_day: f64,
    /// Its t-statistic.
    pub t: f64,
    /// The model fitted.
    pub model: TrendModel,
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

/// The earliest and latest projected times in words, local time: dates, or dates and hours
/// when the range is shorter than two days (so that a tight range never reads "between
/// 2026-12-11 and 2026-12-11"). The alerts and the shift report both write them so.
pub fn range_text(lo_ms: i64, hi_ms: i64, tz: &jiff::tz::TimeZone) -> (String, String) {
    let fmt = |ms: i64, f: &str| {
        jiff::Timestamp::from_millisecond(ms)
            .map(|t| t.to_zoned_datetime(tz.clone()).strftime(f).to_string())
            .unwrap_or_default()
    };
    if hi_ms - lo_ms < 2 * 86_400_000 {
        (fmt(lo_ms, "%Y-%m-%d %H:00"), fmt(hi_ms + 3_599_999, "%Y-%m-%d %H:00"))
    } else {
        (crate::core::calendar::day_of(lo_ms + 1, tz), crate::core::calendar::day_of(hi_ms + 1, tz))
    }
}

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
        model: TrendModel::Linear,
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
            trend.model = TrendModel::Asymptotic;
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

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;
    use crate::core::monitor::tests::T0;
    use crate::rng::Rng;

    const HOUR: i64 = 3_600_000;

    /// Hourly blocks over `days` days from T0 with effectiveness `eff(day)` and noise of σ
    /// 0.0005; the end of the last.
    fn blocks(days: i64, eff: impl Fn(f64) -> f64) -> (Vec<(i64, Option<f64>)>, i64) {
        let mut rng = Rng::new(31);
        let v: Vec<(i64, Option<f64>)> = (1..=days * 24)
            .map(|i| (T0 + i * HOUR, Some(eff(i as f64 / 24.0) + 0.0005 * rng.normal())))
            .collect();
        let now = v.last().unwrap().0;
        (v, now)
    }

    #[test]
    fn a_declining_effectiveness_gives_a_projected_limit_date_within_its_range() {
        let cfg = MonitorConfig::default();
        // One point in a hundred lost per day from 97 %: the 85 % limit falls on day 12.
        let (v, now) = blocks(6, |d| 0.97 - 0.01 * d);
        let t = fit_trend(&cfg, now, None, v).unwrap();
        assert_eq!(t.model, TrendModel::Linear);
        // Points four hours apart, stamped at the end of their slot: blocks 1–3 make the first,
        // block 144 alone the last.
        assert_eq!(t.points.len(), 37);
        assert!((t.slope_per_day + 0.01).abs() < 2e-4, "slope {}", t.slope_per_day);
        assert!(t.t < -cfg.trend_t_min);
        // 0.91 now, and about 0.001 more: a point is stamped at its slot's end, on average
        // 2.5 h after its blocks.
        assert!((t.now - 0.911).abs() < 0.0005, "now {}", t.now);
        let at = t.limit_ms.unwrap();
        let (lo, hi) = t.range_ms.unwrap();
        let day12 = T0 + 12 * 86_400_000;
        assert!((at - day12).abs() < 86_400_000 / 4, "limit {} h from day 12", (at - day12) / HOUR);
        assert!(lo < at && at < hi && hi - lo < 2 * 86_400_000, "{lo} {at} {hi}");
    }

    #[test]
    fn a_levelling_off_effectiveness_is_asymptotic_and_not_projected() {
        let cfg = MonitorConfig::default();
        let (v, now) = blocks(8, |d| 0.9 + 0.1 * (-d).exp());
        let t = fit_trend(&cfg, now, None, v).unwrap();
        assert_eq!(t.model, TrendModel::Asymptotic);
        assert!((t.asymptote.unwrap() - 0.9).abs() < 0.005, "{:?}", t.asymptote);
        assert_eq!((t.limit_ms, t.range_ms), (None, None), "it stays above the 85 % limit");
    }

    #[test]
    fn the_fit_starts_a_day_before_the_episode_and_needs_six_points() {
        let cfg = MonitorConfig::default();
        let (v, now) = blocks(6, |d| 0.97 - 0.01 * d);
        let episode = T0 + 4 * 86_400_000;
        let t = fit_trend(&cfg, now, Some(episode), v.clone()).unwrap();
        assert_eq!(t.points.first().unwrap().0, episode - 86_400_000 + 4 * HOUR);
        assert_eq!(t.points.len(), 19, "the last three days");
        // Sixteen hours of blocks make five points: no trend.
        assert_eq!(fit_trend(&cfg, v[15].0, None, v[..16].to_vec()), None);
        assert!(fit_trend(&cfg, v[19].0, None, v[..20].to_vec()).is_some(), "six points do");
        // Blocks without an effectiveness are skipped.
        let none: Vec<(i64, Option<f64>)> = v.iter().map(|(t, _)| (*t, None)).collect();
        assert_eq!(fit_trend(&cfg, now, None, none), None);
    }
}
