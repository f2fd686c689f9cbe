//! The pure core: interval assembly, the per-interval unit model, the monitor and the alert
//! lifecycle. No I/O and no clock: every function is driven by event time and its state
//! serializes into the checkpoint.
//!
//! [`UnitCore::step`] is the whole per-interval computation of one unit: one closed interval
//! in, one [`Outcome`] out (the evaluation, the monitor's state, the alert events and the notes
//! for the log). The pipeline feeds it and hands the outcome to the sinks.

use std::sync::Arc;

pub mod alerts;
pub mod assembly;
pub mod calendar;
pub mod effluent;
pub mod flags;
pub mod model;
pub mod monitor;
pub mod spec;
pub mod vocabulary;

use alerts::{AlertBook, AlertEvent, Shelf};
use assembly::Closed;
use calendar::DayCache;
use model::{Evaluation, evaluate_with};
use monitor::{Monitor, MonitorState};
use spec::UnitSpec;

use crate::thermo::vapor::BubbleMemo;

/// A line for the log that an interval produced.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Note {
    /// Something notable happened in the monitor (a baseline was learned).
    Monitor(String),
    /// A change an engineer asked for or that expired (shelves): for the audit trail.
    Audit(String),
}

/// What one closed interval produced.
#[derive(Debug, Clone, PartialEq)]
pub struct Outcome {
    /// The evaluation, with the monitor's compensated prediction, flags and conditions.
    pub evaluation: Evaluation,
    /// The monitor's state after the interval.
    pub state: MonitorState,
    /// Alert events, in sequence order.
    pub events: Vec<AlertEvent>,
    /// Lines for the log.
    pub notes: Vec<Note>,
}

/// The per-interval computation of one unit, with its monitor and alert book.
#[derive(Debug, Clone)]
pub struct UnitCore {
    spec: Arc<UnitSpec>,
    monitor: Monitor,
    alerts: AlertBook,
    /// Local dates of interval ends, for the events' RFC 3339 times.
    days: DayCache,
    /// The last bubble point of the effluent (a cache: not part of the saved state).
    bubble: BubbleMemo,
}

impl UnitCore {
    /// A unit's core, from its saved monitor and alert book (or fresh ones).
    pub fn new(spec: Arc<UnitSpec>, monitor: Option<Monitor>, alerts: AlertBook) -> UnitCore {
        let monitor = monitor.unwrap_or_else(|| Monitor::new(&spec.monitor, spec.interval_ms));
        UnitCore { spec, monitor, alerts, days: DayCache::default(), bubble: BubbleMemo::default() }
    }

    /// The unit it computes for.
    pub fn spec(&self) -> &UnitSpec {
        &self.spec
    }

    /// The monitor (for the checkpoint and status displays).
    pub fn monitor(&self) -> &Monitor {
        &self.monitor
    }

    /// The alert book (for the checkpoint and status displays).
    pub fn alerts(&self) -> &AlertBook {
        &self.alerts
    }

    /// Evaluate one closed interval, step the monitor and the alert lifecycle.
    pub fn step(&mut self, closed: &Closed) -> Outcome {
        let spec = &*self.spec;
        let estimate = self.monitor.extent_estimate();
        let mut evaluation = evaluate_with(spec, closed, estimate, &mut self.bubble);
        let mo = self.monitor.step(&spec.monitor, spec, &mut evaluation);
        let mut notes: Vec<Note> = mo.note.into_iter().map(Note::Monitor).collect();
        evaluation.flags.extend(mo.flags);
        evaluation.conditions.extend(mo.conditions);
        let mut time = String::new();
        self.days.rfc3339_into(&mut time, evaluation.end_ms, &spec.time_zone);
        let (events, audit) =
            self.alerts.step(&spec.name, evaluation.end_ms, &time, &evaluation.conditions, spec.alerts);
        notes.extend(audit.into_iter().map(Note::Audit));
        Outcome { evaluation, state: mo.state, events, notes }
    }

    /// Forget the baseline and learn a new one from the next steady data (after maintenance).
    pub fn rebaseline(&mut self) {
        self.monitor.rebaseline();
    }

    /// Shelve alerts; returns the audit note.
    pub fn shelve(&mut self, shelf: Shelf) -> String {
        self.alerts.shelve(shelf)
    }

    /// Remove a shelf; returns whether there was one.
    pub fn unshelve(&mut self, selector: &str) -> bool {
        self.alerts.unshelve(selector)
    }
}

#[cfg(test)]
mod tests;
