//! Analyzer health: each analyzer's update cadence, learnt from the data, and a frozen
//! analyzer.
//!
//! An online analyzer reports a new result once per analysis cycle, and the export holds it
//! until the next one; a result that is "never stale" because the export repeats it is the
//! normal case. The results of a working analyzer change at every update (their own noise is
//! far above the reporting resolution), so the time between changes of any of its components
//! is its cycle. An analyzer whose results have not changed for two and a half of its cycles
//! (and for longer than the longest wait seen recently) has missed at least two updates: it is
//! frozen, and raised as an instrument fault naming its tags. It clears at the next change.
//!
//! The results themselves are judged here too, over the analyzer's updates rather than per
//! interval (a held result would otherwise count once per interval): a feed or effluent
//! analyzer whose fractions sum outside the unit's `analyzer_sum_tolerance`, or an effluent
//! analysis that fails the reconciliation's global test, in at least 4 of its last 6 updates is
//! one `data_quality` alert naming the analyzer (subjects `<tag>:sum` and `<tag>:balance`),
//! cleared after 12 good updates in a row (144 for a balance error).
//!
//! An outage (no values) is the staleness checks' business and restarts the clock, and an
//! analyzer whose results stop arriving (the export holds the last one with no new samples)
//! is stale, not frozen: a freeze is only called in an interval that brought fresh reports.

use std::collections::VecDeque;

use serde::{Deserialize, Serialize};

use super::active::{Held, ev, round};
use super::stats;
use crate::core::model::Evaluation;
use crate::core::spec::{Signal, UnitSpec};
use crate::core::vocabulary::{Cause, Severity};

/// Updates needed before the cadence is trusted.
const MIN_UPDATES: usize = 8;
/// Recent waits between updates kept for the cadence.
const KEEP: usize = 30;
/// A freeze is called after this many cycles without a change.
const CYCLES: f64 = 2.5;
/// Updates judged for a result error ...
const JUDGED: usize = 6;
/// ... of which this many bad raise it; it clears after this many good ones in a row.
const BAD: usize = 4;
const GOOD: usize = 12;
/// A balance error clears only after this many good analyses in a row (about a day at a
/// 10-min cycle): it usually means the configured feed or stoichiometry is off, which comes and
/// goes with the operating point.
const GOOD_BALANCE: usize = 144;

/// One analyzer: the tags it reports and its recent updates.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
struct Group {
    /// What it analyses ("effluent", or a feed's name).
    stream: String,
    /// Its tags (indices into the unit's tags).
    tags: Vec<usize>,
    /// The values last seen.
    last: Vec<Option<f64>>,
    /// When they last changed, ms (`None` until a change is seen after an outage or a gap).
    last_change_ms: Option<i64>,
    /// Recent waits between changes, ms.
    waits: VecDeque<i64>,
    /// The feed it analyses (`None`: the effluent).
    #[serde(default)]
    feed: Option<usize>,
    /// The results last judged.
    #[serde(default)]
    judged: Vec<Option<f64>>,
    /// Recent updates: (sum outside the tolerance, failed the global test), the last
    /// `GOOD_BALANCE`.
    #[serde(default)]
    recent: VecDeque<(bool, bool)>,
}

/// The analyzers of a unit (serialized as a plain list).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(transparent)]
pub(super) struct Analyzers(Vec<Group>);

/// The analyzers a unit has: one per analysed stream, with at least one tag.
fn groups(unit: &UnitSpec) -> Vec<(String, Option<usize>, Vec<usize>)> {
    let tags = |sigs: &[Signal]| -> Vec<usize> {
        sigs.iter()
            .filter_map(|s| match s {
                Signal::Tag(i) => Some(*i),
                Signal::Fixed { .. } => None,
            })
            .collect()
    };
    let mut out: Vec<(String, Option<usize>, Vec<usize>)> = Vec::new();
    for (j, f) in unit.feeds.iter().enumerate() {
        out.push((f.name.clone(), Some(j), tags(&f.composition)));
    }
    if let Some((sigs, _)) = &unit.effluent_composition {
        out.push(("effluent".to_string(), None, tags(sigs)));
    }
    out.retain(|(_, _, t)| !t.is_empty());
    out
}

impl Analyzers {
    /// Nothing learnt yet (not written to the checkpoint then).
    pub(super) fn is_empty(&self) -> bool {
        self.0.is_empty()
    }

    /// After a pause or a gap: the next change starts the clock again.
    pub(super) fn forget_changes(&mut self) {
        for g in &mut self.0 {
            g.last_change_ms = None;
        }
    }

    /// One interval's tag values (SI) and sample ranges (`None` for a tag with no sample in
    /// the interval): learn the cadences, raise and clear frozen analyzers.
    pub(super) fn check(
        &mut self,
        unit: &UnitSpec,
        now: i64,
        values: &[Option<f64>],
        ranges: &[Option<(f64, f64)>],
        active: &mut Held,
    ) {
        for g in &mut self.0 {
            g.step(unit, now, values, ranges, active);
        }
    }
}

impl Analyzers {
    /// One group per analyzer of the unit (rebuilt when the configuration changed); once per
    /// interval, before the checks.
    pub(super) fn fit(&mut self, unit: &UnitSpec) {
        let wanted = groups(unit);
        if self.0.len() != wanted.len()
            || self.0.iter().zip(&wanted).any(|(g, w)| g.tags != w.2 || g.feed != w.1)
        {
            self.0 = wanted
                .into_iter()
                .map(|(stream, feed, tags)| Group {
                    stream,
                    feed,
                    last: vec![None; tags.len()],
                    tags,
                    ..Group::default()
                })
                .collect();
        }
    }

    /// Judge the analyzers' results at their updates: sums outside the tolerance (feeds and
    /// effluent) and failed global tests of the effluent reconciliation (only when `steady`:
    /// after a feed move the reactor's contents have not caught up with the feed yet).
    pub(super) fn judge_results(&mut self, unit: &UnitSpec, e: &Evaluation, steady: bool, active: &mut Held) {
        for g in &mut self.0 {
            let cur: Vec<Option<f64>> =
                g.tags.iter().map(|i| e.signals.tag_values_si.get(*i).copied().flatten()).collect();
            let update = match g.feed {
                Some(j) => {
                    let new = cur.iter().all(Option::is_some) && cur != g.judged;
                    e.signals.feed_sums.get(j).copied().flatten().filter(|_| new).map(|sum| (sum, false))
                }
                None => e.signals.effluent_check.as_ref().map(|c| (c.sum, c.gross_error && steady)),
            };
            g.judged = cur;
            let Some((sum, gross)) = update else { continue };
            g.recent.push_back(((sum - 1.0).abs() > unit.analyzer_sum_tolerance, gross));
            while g.recent.len() > GOOD_BALANCE {
                g.recent.pop_front();
            }
            g.judge(unit, e.end_ms, sum, active);
        }
    }
}

impl Group {
    /// Raise or clear the result errors after an update.
    fn judge(&self, unit: &UnitSpec, now: i64, sum: f64, active: &mut Held) {
        let first = &unit.tags[self.tags[0]].name;
        let names: Vec<&str> = self.tags.iter().map(|i| unit.tags[*i].name.as_str()).collect();
        let last = self.recent.iter().skip(self.recent.len().saturating_sub(JUDGED));
        let (bad_sums, bad_tests) =
            last.fold((0, 0), |(s, t), r| (s + usize::from(r.0), t + usize::from(r.1)));
        // Cleared only after a long good run (a marginal analyzer would otherwise flap).
        let tail = |n: usize| self.recent.iter().skip(self.recent.len().saturating_sub(n));
        let sums_good = self.recent.len() >= GOOD && tail(GOOD).all(|r| !r.0);
        let tests_good = self.recent.len() >= GOOD_BALANCE && tail(GOOD_BALANCE).all(|r| !r.1);
        let tolerance = unit.analyzer_sum_tolerance;
        let sum_subject = format!("{first}:sum");
        if bad_sums >= BAD {
            let message = format!(
                "The {} analyzer ({}) sums to {:.1} % ({bad_sums} of its last {} results outside 100 ± {:.1} %): the results are normalised, but check its calibration.",
                self.stream,
                names.join(", "),
                sum * 100.0,
                JUDGED.min(self.recent.len()),
                tolerance * 100.0
            );
            let evidence = ev(&[
                ("tags", names.join(",").into()),
                ("sum", round(sum, 4)),
                ("tolerance", tolerance.into()),
            ]);
            active.raise(
                Cause::DataQuality,
                &sum_subject,
                Severity::Low,
                message,
                (sum - 1.0).abs(),
                now,
                evidence,
            );
        } else if sums_good {
            active.retain(|a| a.subject != sum_subject);
        }
        let test_subject = format!("{first}:balance");
        if bad_tests >= BAD {
            let message = format!(
                "The effluent analyzer ({}) contradicts the element balance and the reactions in {bad_tests} of its last {} results (global test at the 0.1 % level): its results are left out of the conversions; check the analyzer, the feed analysis and the stoichiometry.",
                names.join(", "),
                JUDGED.min(self.recent.len())
            );
            let evidence = ev(&[("tags", names.join(",").into()), ("failed_results", bad_tests.into())]);
            active.raise(
                Cause::DataQuality,
                &test_subject,
                Severity::Medium,
                message,
                bad_tests as f64,
                now,
                evidence,
            );
        } else if tests_good {
            active.retain(|a| a.subject != test_subject);
        }
    }

    fn subject(&self, unit: &UnitSpec) -> String {
        format!("{}:frozen", unit.tags[self.tags[0]].name)
    }

    fn step(
        &mut self,
        unit: &UnitSpec,
        now: i64,
        values: &[Option<f64>],
        ranges: &[Option<(f64, f64)>],
        active: &mut Held,
    ) {
        let cur: Vec<Option<f64>> = self.tags.iter().map(|i| values.get(*i).copied().flatten()).collect();
        let subject = self.subject(unit);
        if cur.iter().any(Option::is_none) {
            self.last_change_ms = None;
            self.last = cur;
            return;
        }
        let changed = cur.iter().zip(&self.last).any(|(c, l)| match (c, l) {
            (Some(c), Some(l)) => (c - l).abs() > 1e-12 * c.abs().max(1e-6),
            _ => true,
        });
        self.last = cur;
        if changed {
            if let Some(t) = self.last_change_ms {
                self.waits.push_back(now - t);
                while self.waits.len() > KEEP {
                    self.waits.pop_front();
                }
            }
            self.last_change_ms = Some(now);
            active.retain(|a| !(a.cause == Cause::InstrumentFault && a.subject == subject));
            return;
        }
        // Held by the export with nothing new reported: stale (if it lasts), not frozen.
        let reported = self.tags.iter().all(|i| ranges.get(*i).is_some_and(Option::is_some));
        let (Some(since), true, true) = (self.last_change_ms, self.waits.len() >= MIN_UPDATES, reported)
        else {
            return;
        };
        let waits: Vec<f64> = self.waits.iter().map(|w| *w as f64).collect();
        let cycle = stats::median(&waits);
        let longest = waits.iter().copied().fold(0.0, f64::max);
        let waited = (now - since) as f64;
        if waited > (CYCLES * cycle).max(1.25 * longest) {
            self.raise(unit, &subject, cycle, waited, now, active);
        }
    }

    fn raise(&self, unit: &UnitSpec, subject: &str, cycle: f64, waited: f64, now: i64, active: &mut Held) {
        let names: Vec<&str> = self.tags.iter().map(|i| unit.tags[*i].name.as_str()).collect();
        let (cycle_min, waited_min) = (cycle / 60_000.0, waited / 60_000.0);
        let message = format!(
            "The {} analyzer ({}) has reported the same results for {waited_min:.0} min, {:.1} of its usual {cycle_min:.0}-min cycles: it looks frozen; check it before trusting the composition it reports.",
            self.stream,
            names.join(", "),
            waited / cycle
        );
        let evidence = ev(&[
            ("tags", names.join(",").into()),
            ("cycle_minutes", round(cycle_min, 1)),
            ("unchanged_minutes", round(waited_min, 0)),
        ]);
        active.raise(
            Cause::InstrumentFault,
            subject,
            Severity::Medium,
            message,
            waited / cycle,
            now,
            evidence,
        );
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;
    use crate::rng::Rng;

    /// The monitor's test unit with a feed analyzer (two tags, in mol%).
    fn unit() -> UnitSpec {
        crate::core::tests::unit_spec(
            r#"{ water = { tag = "AI-104A", unit = "%" }, methyl_acetate = { tag = "AI-104B", unit = "%" } }
normalize = true"#,
            "",
        )
    }

    const MIN: i64 = 60_000;

    /// The analyzer tags of the test unit and a row of values with them updated every
    /// `cycle` minutes (with noise), held in between; frozen from minute `freeze` on.
    fn run(cycle: i64, freeze: i64, minutes: i64) -> Vec<(i64, bool)> {
        let u = unit();
        let tags: Vec<usize> = groups(&u).into_iter().flat_map(|g| g.2).collect();
        assert!(!tags.is_empty(), "the test unit has an analyzer");
        let mut rng = Rng::new(7);
        let mut a = Analyzers::default();
        a.fit(&u);
        let mut held = Held::default();
        let mut values = vec![Some(1.0); u.tags.len()];
        let mut out = Vec::new();
        for m in 0..minutes {
            if m % cycle == 0 && m < freeze {
                for i in &tags {
                    values[*i] = Some(0.3 + 0.003 * rng.normal());
                }
            }
            let ranges: Vec<Option<(f64, f64)>> = values.iter().map(|v| v.map(|v| (v, v))).collect();
            a.check(&u, m * MIN, &values, &ranges, &mut held);
            out.push((m, held.iter().any(|x| x.subject.ends_with(":frozen"))));
        }
        out
    }

    #[test]
    fn a_working_analyzer_is_never_called_frozen() {
        assert!(run(10, i64::MAX, 3000).iter().all(|(_, f)| !f));
    }

    #[test]
    fn a_frozen_analyzer_is_found_within_three_cycles_and_clears_when_it_updates() {
        let got = run(10, 2000, 2100);
        let first = got.iter().find(|(_, f)| *f).map(|(m, _)| *m).unwrap();
        // The last update was at minute 1990; three cycles later is minute 2020.
        assert!((2010..=2020).contains(&first), "raised at minute {first}");
        assert!(got.iter().filter(|(m, _)| *m < 2000).all(|(_, f)| !f));
    }

    #[test]
    fn an_outage_restarts_the_clock_instead_of_calling_a_freeze() {
        let u = unit();
        let tags: Vec<usize> = groups(&u).into_iter().flat_map(|g| g.2).collect();
        let mut a = Analyzers::default();
        a.fit(&u);
        let mut held = Held::default();
        let mut values = vec![Some(1.0); u.tags.len()];
        for m in 0..400 {
            let on = !(200..300).contains(&m);
            for i in &tags {
                values[*i] = on.then_some(0.3 + 1e-3 * (m / 10) as f64);
            }
            let ranges: Vec<Option<(f64, f64)>> = values.iter().map(|v| v.map(|v| (v, v))).collect();
            a.check(&u, m * MIN, &values, &ranges, &mut held);
            assert!(held.is_empty(), "minute {m}");
        }
    }

    #[test]
    fn results_that_stop_arriving_are_not_a_freeze() {
        // The export holds the last result, but no sample arrives: staleness, not a freeze.
        let u = unit();
        let tags: Vec<usize> = groups(&u).into_iter().flat_map(|g| g.2).collect();
        let mut rng = Rng::new(3);
        let mut a = Analyzers::default();
        a.fit(&u);
        let mut held = Held::default();
        let mut values = vec![Some(1.0); u.tags.len()];
        for m in 0..600 {
            let fresh = m < 300 && m % 10 == 0;
            if fresh {
                for i in &tags {
                    values[*i] = Some(0.3 + 0.003 * rng.normal());
                }
            }
            let ranges: Vec<Option<(f64, f64)>> = (0..values.len())
                .map(|i| if tags.contains(&i) && !fresh { None } else { values[i].map(|v| (v, v)) })
                .collect();
            a.check(&u, m * MIN, &values, &ranges, &mut held);
            assert!(held.is_empty(), "minute {m}");
        }
        // The same results reported again after all that is a freeze.
        let ranges: Vec<Option<(f64, f64)>> = values.iter().map(|v| v.map(|v| (v, v))).collect();
        a.check(&u, 600 * MIN, &values, &ranges, &mut held);
        assert!(held.iter().any(|x| x.subject.ends_with(":frozen")));
    }

    /// A feed analyzer's updates summing to `sum`: the alerts held after each of `n` updates
    /// (10 intervals apart).
    fn sums(sum: impl Fn(usize) -> f64, n: usize) -> Vec<bool> {
        let u = unit();
        let tags: Vec<usize> = groups(&u).into_iter().flat_map(|g| g.2).collect();
        let mut a = Analyzers::default();
        a.fit(&u);
        let mut held = Held::default();
        let mut rng = Rng::new(9);
        let mut out = Vec::new();
        let mut values = vec![Some(1.0); u.tags.len()];
        for k in 0..n * 10 {
            let mut e = crate::core::monitor::tests::evaluation(
                k as i64,
                crate::core::monitor::tests::Point::nominal(),
            );
            if k % 10 == 0 {
                for i in &tags {
                    values[*i] = Some(0.5 + 0.01 * rng.normal());
                }
            }
            e.signals.tag_values_si = values.clone();
            e.signals.feed_sums = vec![Some(sum(k / 10))];
            a.judge_results(&u, &e, true, &mut held);
            if k % 10 == 9 {
                out.push(held.iter().any(|x| x.subject.ends_with(":sum")));
            }
        }
        out
    }

    #[test]
    fn a_persistent_sum_error_is_one_alert_and_normal_sums_are_none() {
        // 99-101 % is normal for an analyzer that reports its components separately.
        assert!(sums(|k| 1.0 + 0.01 * ((k % 3) as f64 - 1.0), 60).iter().all(|h| !h));
        // 103 % from update 10 to 39: raised at the 4th bad update, held throughout (also
        // across one good result), cleared after 12 good ones.
        let held = sums(|k| if (10..40).contains(&k) && k != 25 { 1.03 } else { 1.0 }, 70);
        assert_eq!(held.iter().position(|h| *h), Some(13));
        assert!(held[13..40].iter().all(|h| *h));
        assert_eq!(held[40..].iter().position(|h| !h), Some(11));
    }
}
