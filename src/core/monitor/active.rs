//! The alert conditions the monitor holds with its own hysteresis: raised by the instrument
//! checks and by the cause attribution, cleared by the attribution's clean-block count, and
//! handed to the alert lifecycle every interval. Also the helpers that write their evidence.

use serde::{Deserialize, Serialize};

use crate::core::vocabulary::{Cause, Condition, Severity};

/// An alert condition the monitor keeps with its own hysteresis.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(super) struct Active {
    pub(super) cause: Cause,
    pub(super) subject: String,
    pub(super) severity: Severity,
    pub(super) message: String,
    pub(super) magnitude: f64,
    pub(super) since_ms: i64,
    pub(super) clean: u32,
    pub(super) evidence: serde_json::Map<String, serde_json::Value>,
}

impl Active {
    /// The offset of an instrument step alert (its `step_k` evidence); `None` for every other
    /// alert, including frozen tags and spikes.
    pub(super) fn step_k(&self) -> Option<f64> {
        if self.cause != Cause::InstrumentFault {
            return None;
        }
        self.evidence.get("step_k").and_then(serde_json::Value::as_f64)
    }
}

/// Whether a cause is one of the explanations of a process deviation (heater fouling, a
/// conversion drift, heat loss, or none of them for sure), of which one stands at a time.
pub(super) fn explains_deviation(cause: Cause) -> bool {
    matches!(cause, Cause::HeaterFouling | Cause::ConversionDrift | Cause::Undetermined | Cause::HeatLoss)
}

/// The conditions held, in the order they were raised (serialized as a plain list).
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(transparent)]
pub(super) struct Held(Vec<Active>);

impl Held {
    /// Raise a condition, or refresh the one of the same cause and subject.
    #[allow(clippy::too_many_arguments)]
    pub(super) fn raise(
        &mut self,
        cause: Cause,
        subject: &str,
        severity: Severity,
        message: String,
        magnitude: f64,
        now: i64,
        evidence: serde_json::Map<String, serde_json::Value>,
    ) {
        match self.0.iter_mut().find(|a| a.cause == cause && a.subject == subject) {
            Some(a) => {
                a.message = message;
                a.severity = severity;
                a.magnitude = magnitude;
                a.clean = 0;
                a.evidence = evidence;
            }
            None => {
                // A new explanation of the same deviation replaces the previous one.
                if explains_deviation(cause) {
                    self.0.retain(|a| !explains_deviation(a.cause));
                }
                self.0.push(Active {
                    cause,
                    subject: subject.to_string(),
                    severity,
                    message,
                    magnitude,
                    since_ms: now,
                    clean: 0,
                    evidence,
                });
            }
        }
    }

    /// The held conditions as conditions for the alert lifecycle, with their magnitude in the
    /// evidence.
    pub(super) fn emit(&self, out: &mut Vec<Condition>) {
        for a in &self.0 {
            let mut evidence = a.evidence.clone();
            evidence.insert("magnitude".into(), round(a.magnitude, 3));
            out.push(Condition {
                cause: a.cause,
                subject: a.subject.clone(),
                severity: a.severity,
                message: a.message.clone(),
                evidence,
                magnitude: Some(a.magnitude),
            });
        }
    }

    /// The held conditions, oldest first.
    pub(super) fn iter(&self) -> std::slice::Iter<'_, Active> {
        self.0.iter()
    }

    /// The held conditions, oldest first, to count clean blocks on.
    pub(super) fn iter_mut(&mut self) -> std::slice::IterMut<'_, Active> {
        self.0.iter_mut()
    }

    /// Keep only the conditions `keep` accepts.
    pub(super) fn retain(&mut self, keep: impl FnMut(&Active) -> bool) {
        self.0.retain(keep);
    }

    /// Whether a condition of `cause` about `subject` is held.
    pub(super) fn holds(&self, cause: Cause, subject: &str) -> bool {
        self.0.iter().any(|a| a.cause == cause && a.subject == subject)
    }

    /// Whether nothing is held.
    pub(super) fn is_empty(&self) -> bool {
        self.0.is_empty()
    }

    /// Forget every condition (a new baseline).
    pub(super) fn clear(&mut self) {
        self.0.clear();
    }
}

/// Evidence from (key, value) pairs, in their order.
pub(super) fn ev(pairs: &[(&str, serde_json::Value)]) -> serde_json::Map<String, serde_json::Value> {
    pairs.iter().map(|(k, v)| ((*k).to_string(), v.clone())).collect()
}

/// `x` rounded to `d` decimals, as a JSON number.
pub(super) fn round(x: f64, d: i32) -> serde_json::Value {
    let f = 10f64.powi(d);
    ((x * f).round() / f).into()
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    fn raise(held: &mut Held, cause: Cause, subject: &str, message: &str, now: i64) {
        held.raise(
            cause,
            subject,
            Severity::Medium,
            message.into(),
            1.5,
            now,
            ev(&[("k", round(0.12345, 3))]),
        );
    }

    fn causes(held: &Held) -> Vec<(Cause, &str)> {
        held.iter().map(|a| (a.cause, a.subject.as_str())).collect()
    }

    #[test]
    fn a_new_explanation_replaces_the_previous_one_but_instrument_faults_stay() {
        let mut held = Held::default();
        raise(&mut held, Cause::InstrumentFault, "TI-109", "step", 1);
        raise(&mut held, Cause::Undetermined, "energy balance", "cannot tell", 2);
        raise(&mut held, Cause::HeaterFouling, "heater", "fouling", 3);
        assert_eq!(causes(&held), vec![(Cause::InstrumentFault, "TI-109"), (Cause::HeaterFouling, "heater")]);
        // The same cause and subject again: refreshed in place, its clean count restarted.
        held.iter_mut().for_each(|a| a.clean = 4);
        raise(&mut held, Cause::HeaterFouling, "heater", "fouling, worse", 9);
        let a = held.iter().nth(1).unwrap();
        assert_eq!((a.message.as_str(), a.since_ms, a.clean), ("fouling, worse", 3, 0));
        assert_eq!(held.iter().next().unwrap().clean, 4, "the other condition keeps its count");
        assert!(
            held.holds(Cause::InstrumentFault, "TI-109") && !held.holds(Cause::InstrumentFault, "heater")
        );
    }

    #[test]
    fn held_conditions_go_out_with_their_magnitude_and_only_steps_have_an_offset() {
        let mut held = Held::default();
        raise(&mut held, Cause::InstrumentFault, "TI-109", "step", 1);
        held.raise(
            Cause::InstrumentFault,
            "JI-103",
            Severity::Medium,
            "meter".into(),
            0.8,
            1,
            ev(&[("step_k", (-0.8).into())]),
        );
        let mut out = Vec::new();
        held.emit(&mut out);
        assert_eq!(out.len(), 2);
        assert_eq!((out[0].magnitude, out[0].evidence["magnitude"].as_f64()), (Some(1.5), Some(1.5)));
        assert_eq!(out[0].evidence["k"].as_f64(), Some(0.123));
        let offsets: Vec<Option<f64>> = held.iter().map(Active::step_k).collect();
        assert_eq!(offsets, vec![None, Some(-0.8)]);
        assert!(explains_deviation(Cause::HeatLoss) && !explains_deviation(Cause::InstrumentFault));
    }
}
