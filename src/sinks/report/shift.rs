//! The shift in memory: the rows, inputs, flags, alert lifecycles, requests and data counts of
//! the shift in progress, gathered from each interval's outcome, and what the monitor and the
//! alert book hold (baseline, limits, blocks, trend, active alerts, shelves), taken when it
//! changes. A shift report and the live view are rendered from it, never by reading the
//! soft-tag history back; after a restart the shift in progress is loaded from the files once.

use std::collections::{BTreeMap, VecDeque};
use std::sync::Arc;

use super::ReportUnit;
use super::data::{
    AlertView, BaselineView, BlockPoint, Extra, Inputs, MonitorView, Quality, ReportData, Row, ShelfView,
    lifecycles, load_events, load_rows, mean, touching,
};
use crate::core::alerts::{AlertEvent, EventKind};
use crate::core::calendar::Shift;
use crate::core::flags::Flag;
use crate::core::monitor::Trend;
use crate::core::{Note, Outcome, UnitCore};

/// The pipeline's cumulative read counters of a unit (since the runtime started), handed to
/// [`super::ShiftReports::observe`] before each interval is written.
#[derive(Debug, Clone, Copy, Default)]
pub struct ReadCounts<'a> {
    /// Records read.
    pub records: u64,
    /// Late samples.
    pub late: u64,
    /// Rejections by reason.
    pub rejected: Option<&'a BTreeMap<&'static str, u64>>,
}

/// What the monitor and the alert book hold after an interval.
#[derive(Debug, Clone, Default)]
struct Held {
    baseline: Option<BaselineView>,
    trend: Option<Arc<Trend>>,
    active: Arc<Vec<AlertView>>,
    shelves: Arc<Vec<ShelfView>>,
}

/// At most this many rows per shift are kept (shorter intervals are thinned evenly for the
/// plots; every interval is still counted).
const MAX_ROWS: i64 = 1440;

/// The shift in progress of one unit.
pub struct ShiftBook {
    unit: Arc<ReportUnit>,
    /// The shift, once an interval of it was seen.
    pub shift: Option<Shift>,
    rows: Vec<Row>,
    /// Input values, `inputs.len()` per kept row.
    inputs: Vec<Option<f32>>,
    stride: u64,
    seen: u64,
    flags: Vec<(Flag, u64)>,
    loaded_flags: BTreeMap<String, u64>,
    quality: Quality,
    rejected: BTreeMap<&'static str, u64>,
    lives: BTreeMap<String, (AlertEvent, AlertEvent)>,
    requests: Vec<(i64, String)>,
    shelves: Vec<ShelfView>,
    blocks: Vec<BlockPoint>,
    /// Effectiveness slots over the trend window: (slot, sum, n).
    eff_slots: VecDeque<(i64, f64, usize)>,
    /// After the previous interval, and after this one (from `observe`).
    held: Held,
    next: Held,
    /// `next` differs from `held`.
    next_changed: bool,
    new_blocks: Vec<BlockPoint>,
    last_block_ms: Option<i64>,
    read_delta: (u64, u64),
    rejected_delta: Vec<(&'static str, u64)>,
    last_read: Option<(u64, u64, BTreeMap<&'static str, u64>)>,
    previous_mean: Option<f64>,
    residual_sum: (f64, u64),
    started: bool,
    /// No interval added since this book was created (what the monitor holds is in `next`).
    fresh: bool,
}

impl ShiftBook {
    /// An empty book for `unit`.
    pub fn new(unit: Arc<ReportUnit>) -> ShiftBook {
        ShiftBook {
            unit,
            shift: None,
            rows: Vec::new(),
            inputs: Vec::new(),
            stride: 1,
            seen: 0,
            flags: Vec::new(),
            loaded_flags: BTreeMap::new(),
            quality: Quality::default(),
            rejected: BTreeMap::new(),
            lives: BTreeMap::new(),
            requests: Vec::new(),
            shelves: Vec::new(),
            blocks: Vec::new(),
            eff_slots: VecDeque::new(),
            held: Held::default(),
            next: Held::default(),
            next_changed: false,
            new_blocks: Vec::new(),
            last_block_ms: None,
            read_delta: (0, 0),
            rejected_delta: Vec::new(),
            last_read: None,
            previous_mean: None,
            residual_sum: (0.0, 0),
            started: false,
            fresh: true,
        }
    }

    /// Take what the monitor and the alert book hold after this interval, and what was read
    /// before it closed.
    pub fn observe(&mut self, core: &UnitCore, read: ReadCounts<'_>) {
        let monitor = core.monitor();
        let mut changed = !self.started;
        // New blocks (the history only grows at its end).
        self.new_blocks.clear();
        let last = self.last_block_ms;
        for h in monitor.history.iter().rev().take_while(|h| last.is_none_or(|t| h.end_ms > t)) {
            self.new_blocks.push(BlockPoint { end_ms: h.end_ms, residual_k: h.residual, z: h.z });
        }
        self.new_blocks.reverse();
        if let Some(b) = monitor.history.back() {
            self.last_block_ms = Some(b.end_ms);
        }
        // The new blocks' effectiveness (all of the history at the first interval after a
        // start) goes into the trend window's slots.
        let skip = monitor.history.len() - self.new_blocks.len();
        for (t, e) in monitor.history.iter().skip(skip).map(|h| (h.end_ms, h.eff)) {
            self.add_eff(t, e);
        }
        changed |= !self.new_blocks.is_empty();
        let baseline = monitor.baseline.as_ref().map(BaselineView::of);
        if baseline != self.next.baseline {
            self.next.baseline = baseline;
            changed = true;
        }
        if monitor.trend.as_ref() != self.next.trend.as_deref() {
            self.next.trend = monitor.trend.clone().map(Arc::new);
            changed = true;
        }
        let book = core.alerts();
        if changed || book.shelves.len() != self.next.shelves.len() {
            self.next_changed = true;
            self.next.active = Arc::new(book.active());
            self.next.shelves = Arc::new(
                book.shelves
                    .iter()
                    .map(|s| ShelfView {
                        selector: s.selector.clone(),
                        until_ms: s.until_ms,
                        reason: s.reason.clone(),
                        by: s.by.clone(),
                    })
                    .collect(),
            );
        }
        self.started = true;
        self.read(read);
    }

    fn read(&mut self, read: ReadCounts<'_>) {
        let (r0, l0) = self.last_read.as_ref().map_or((0, 0), |l| (l.0, l.1));
        // Counters restart with the runtime: a smaller value is a new count.
        let fresh = read.records < r0 || read.late < l0;
        let (r0, l0) = if fresh { (0, 0) } else { (r0, l0) };
        self.read_delta = (read.records - r0, read.late - l0);
        self.rejected_delta.clear();
        let empty = BTreeMap::new();
        let now = read.rejected.unwrap_or(&empty);
        let before = self.last_read.as_ref().map(|l| &l.2);
        for (k, v) in now {
            let prev = if fresh { 0 } else { before.and_then(|b| b.get(k)).copied().unwrap_or(0) };
            if *v > prev {
                self.rejected_delta.push((k, v - prev));
            }
        }
        let changed =
            self.last_read.as_ref().is_none_or(|l| l.2.len() != now.len() || !self.rejected_delta.is_empty());
        match &mut self.last_read {
            Some(l) if !changed => {
                l.0 = read.records;
                l.1 = read.late;
            }
            _ => self.last_read = Some((read.records, read.late, now.clone())),
        }
    }

    fn add_eff(&mut self, t: i64, eff: Option<f64>) {
        let Some(e) = eff else { return };
        let point = self.unit.trend_point_ms.max(1);
        let slot = t.div_euclid(point);
        match self.eff_slots.back_mut() {
            Some((s, sum, n)) if *s == slot => {
                *sum += e;
                *n += 1;
            }
            _ => self.eff_slots.push_back((slot, e, 1)),
        }
        let from = (t - self.unit.trend_window_ms).div_euclid(point);
        while self.eff_slots.front().is_some_and(|f| f.0 < from) {
            self.eff_slots.pop_front();
        }
    }

    /// Whether `end_ms` lies past the shift in progress (its report is due).
    pub fn ends_shift(&self, end_ms: i64) -> bool {
        self.shift.as_ref().is_some_and(|s| end_ms > s.end_ms)
    }

    /// Begin the shift containing the interval ending at `end_ms`; `restart_ms` is the end of
    /// the last interval written before a restart: the rows of the shift up to it are loaded
    /// from the files once.
    pub fn begin(&mut self, end_ms: i64, restart_ms: Option<i64>) {
        let Some(shift) =
            crate::core::calendar::shift_containing(end_ms - 1, &self.unit.shifts, &self.unit.time_zone)
        else {
            return;
        };
        let expected = (shift.end_ms - shift.start_ms) / self.unit.interval_ms.max(1);
        self.stride = u64::try_from((expected + MAX_ROWS - 1) / MAX_ROWS).unwrap_or(1).max(1);
        self.seen = 0;
        self.rows.clear();
        self.inputs.clear();
        self.flags.clear();
        self.loaded_flags.clear();
        self.rejected.clear();
        self.quality = Quality::default();
        self.requests.clear();
        self.blocks.retain(|b| b.end_ms > shift.start_ms);
        self.shelves = self.held.shelves.iter().filter(|s| s.until_ms > shift.start_ms).cloned().collect();
        self.residual_sum = (0.0, 0);
        self.lives.retain(|_, (_, last)| last.event != EventKind::Cleared);
        if let Some(t) = restart_ms.filter(|t| *t > shift.start_ms && *t < end_ms) {
            self.load(&shift, t);
        }
        self.shift = Some(shift);
    }

    /// The shift's rows and alert lifecycles up to `to_ms`, from the files (after a restart).
    fn load(&mut self, shift: &Shift, to_ms: i64) {
        let unit = self.unit.clone();
        let dir = unit.output_dir.join(&unit.name);
        let tz = &unit.time_zone;
        for r in load_rows(&dir, &unit.name, shift.start_ms, to_ms, tz) {
            self.quality.intervals += 1;
            self.quality.computed += u64::from(r.predicted.is_some());
            for f in &r.flags {
                *self.loaded_flags.entry(f.clone()).or_default() += 1;
            }
            if let Some(x) = r.residual {
                self.residual_sum.0 += x;
                self.residual_sum.1 += 1;
            }
            self.push_row(Row { flags: Vec::new(), ..r }, None);
        }
        let events = load_events(&dir, &unit.name, to_ms);
        for (first, last) in touching(lifecycles(&events), shift) {
            self.lives.insert(first.alert_id.clone(), (first, last));
        }
        let prev = load_rows(&dir, &unit.name, shift.prev_start_ms, shift.start_ms, tz);
        self.previous_mean = mean(prev.iter().filter_map(|r| r.residual));
        self.quality.counted_from_ms = Some(to_ms);
    }

    fn push_row(&mut self, row: Row, inputs: Option<&[Option<f64>]>) {
        let keep = self.seen.is_multiple_of(self.stride);
        self.seen += 1;
        if !keep {
            return;
        }
        self.rows.push(row);
        let n = self.unit.inputs.len();
        match inputs {
            Some(v) => {
                self.inputs.extend(
                    self.unit
                        .inputs
                        .iter()
                        .map(|i| v.get(i.tag).copied().flatten().map(|si| i.unit.from_si(si) as f32)),
                );
            }
            None => self.inputs.extend(std::iter::repeat_n(None, n)),
        }
    }

    /// Add one interval's outcome (after [`ShiftBook::observe`]).
    pub fn add(&mut self, o: &Outcome) {
        let e = &o.evaluation;
        let unit = self.unit.temperature_unit;
        let t = |k: Option<f64>| k.map(|k| unit.from_si(k));
        let delta = |k: Option<f64>| k.map(|k| unit.from_si(k) - unit.from_si(0.0));
        let row = Row {
            t_ms: e.end_ms,
            predicted: t(e.predicted_k),
            measured: t(e.measured_k),
            residual: delta(e.residual_k),
            u: delta(e.u_pred_k),
            conversion: e.apparent_conversion,
            effectiveness: e.effectiveness,
            state: Some(o.state),
            flags: Vec::new(),
        };
        if let Some(r) = row.residual {
            self.residual_sum.0 += r;
            self.residual_sum.1 += 1;
        }
        self.push_row(row, Some(&e.signals.tag_values_si));
        self.quality.intervals += 1;
        self.quality.computed += u64::from(e.predicted_k.is_some());
        for f in &e.flags {
            match self.flags.iter_mut().find(|(g, _)| g.same_code(f)) {
                Some((_, n)) => *n += 1,
                None => self.flags.push((f.clone(), 1)),
            }
        }
        let (records, late) = self.read_delta;
        *self.quality.records.get_or_insert(0) += records;
        *self.quality.late.get_or_insert(0) += late;
        for (k, v) in &self.rejected_delta {
            *self.rejected.entry(k).or_default() += v;
        }
        self.read_delta = (0, 0);
        self.rejected_delta.clear();
        for ev in &o.events {
            self.lives
                .entry(ev.alert_id.clone())
                .and_modify(|x| x.1 = ev.clone())
                .or_insert_with(|| (ev.clone(), ev.clone()));
        }
        for n in &o.notes {
            if let Note::Audit(text) = n {
                self.requests.push((e.end_ms, text.clone()));
            }
        }
        // What the monitor held after this interval becomes what the shift's report uses.
        let start = self.shift.as_ref().map_or(i64::MIN, |s| s.start_ms);
        self.blocks.extend(self.new_blocks.drain(..).filter(|b| b.end_ms > start));
        if self.held.baseline.is_some() && self.next.baseline.is_none() {
            self.requests
                .push((e.end_ms, "baseline reset: the monitor learns a new one from steady data".into()));
        }
        for s in self.next.shelves.iter() {
            if !self.shelves.iter().any(|x| x.selector == s.selector && x.until_ms == s.until_ms) {
                self.shelves.push(s.clone());
            }
        }
        if self.next_changed || self.fresh {
            self.held = self.next.clone();
            self.next_changed = false;
        }
        self.fresh = false;
    }

    /// Close the shift: its mean residual becomes the previous shift's.
    pub fn close(&mut self) {
        self.previous_mean =
            (self.residual_sum.1 > 0).then(|| self.residual_sum.0 / self.residual_sum.1 as f64);
    }

    /// The report data of the shift so far; `live` for a shift in progress.
    pub fn data(&self, live: bool) -> Option<ReportData> {
        let shift = self.shift.clone()?;
        if self.rows.is_empty() {
            return None;
        }
        let u = &*self.unit;
        // Before the first interval after a restart, what the monitor held then.
        let held = if self.fresh { &self.next } else { &self.held };
        let mut quality = self.quality.clone();
        quality.rejected = self.rejected.iter().map(|(k, v)| ((*k).to_string(), *v)).collect();
        let mut flags = self.loaded_flags.clone();
        let mut code = String::new();
        for (f, n) in &self.flags {
            code.clear();
            f.write_code(&mut code, &u.flag_names);
            *flags.entry(code.clone()).or_default() += n;
        }
        quality.flags = flags;
        let monitor = MonitorView {
            baseline: held.baseline,
            limits: Some(u.limits),
            blocks: self.blocks.clone(),
            trend: held.trend.as_deref().cloned(),
            effectiveness: self
                .eff_slots
                .iter()
                .map(|(s, sum, n)| ((s + 1) * u.trend_point_ms, sum / *n as f64))
                .collect(),
            trend_window_ms: u.trend_window_ms,
        };
        let n = u.inputs.len();
        let inputs = Inputs {
            series: u.inputs.iter().map(|i| i.series.clone()).collect(),
            times: self.rows.iter().map(|r| r.t_ms).collect(),
            values: (0..n)
                .map(|j| {
                    (0..self.rows.len()).map(|k| self.inputs.get(k * n + j).copied().flatten()).collect()
                })
                .collect(),
        };
        let mut lives: Vec<(AlertEvent, AlertEvent)> = self.lives.values().cloned().collect();
        lives.sort_by_key(|x| x.0.sequence);
        let extra = Extra {
            monitor: Some(monitor),
            design_conversion: u.design_conversion,
            effectiveness_limit: u.effectiveness_limit,
            inputs,
            quality,
            active: held.active.iter().filter(|a| a.raised_ms <= shift.end_ms).cloned().collect(),
            shelves: self.shelves.clone(),
            requests: self.requests.clone(),
            previous_mean_residual: self.previous_mean,
        };
        Some(ReportData {
            site: u.site.clone(),
            unit: (u.name.clone(), u.description.clone()),
            live_until_ms: live.then(|| self.rows.last().map_or(shift.start_ms, |r| r.t_ms)),
            shift,
            tz: u.time_zone.clone(),
            temperature_unit: u.temperature_unit,
            rows: self.rows.clone(),
            interval_ms: u.interval_ms,
            lifecycles: lives,
            extra,
        })
    }

    /// The last residuals (up to `n`), for a sparkline: (ms, value).
    pub fn recent_residuals(&self, n: usize) -> Vec<(i64, Option<f64>)> {
        self.rows.iter().rev().take(n).rev().map(|r| (r.t_ms, r.residual)).collect()
    }

    /// The unit it belongs to.
    pub fn unit(&self) -> &ReportUnit {
        &self.unit
    }

    /// The last row, if any.
    pub fn last_row(&self) -> Option<&Row> {
        self.rows.last()
    }

    /// The alerts active after the last interval.
    pub fn active(&self) -> &[AlertView] {
        if self.fresh { &self.next.active } else { &self.held.active }
    }
}
