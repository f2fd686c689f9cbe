//! The unit as the core sees it: its tags with their units, kinds and uncertainties, where each
//! model input comes from, the thermodynamic system, the reactions' conversions, and the
//! settings of the monitor and the alert lifecycle. Built once by the site loader.

use jiff::tz::TimeZone;

use crate::core::alerts::AlertConfig;
use crate::core::monitor::settings::MonitorConfig;
use crate::core::vocabulary::TagKind;
use crate::thermo::balance::{Basis, System};
use crate::units::Unit;

/// A reactor unit as the core sees it: no file names, directories or layouts.
#[derive(Debug, Clone)]
pub struct UnitSpec {
    /// Name (file names, alert ids).
    pub name: String,
    /// Time zone for daily files, reports and local timestamps.
    pub time_zone: TimeZone,
    /// Interval, ms.
    pub interval_ms: i64,
    /// Lateness allowance, ms.
    pub max_wait_ms: i64,
    /// Reorder window, ms: an interval closes only once data has passed its end by this, so
    /// rows this much out of order are still used (at most `max_wait_ms`).
    pub reorder_ms: i64,
    /// Components, paths, reactions.
    pub system: System,
    /// Every tag the unit reads.
    pub tags: Vec<TagConfig>,
    /// Feeds.
    pub feeds: Vec<FeedConfig>,
    /// Reported duty.
    pub duty: Signal,
    /// Heat loss.
    pub heat_loss: Signal,
    /// Measured effluent temperature (always a tag).
    pub effluent_temperature: usize,
    /// Effluent analyzer, per component, with its basis.
    pub effluent_composition: Option<(Vec<Signal>, Basis)>,
    /// Time constant of the smoothing of the analyzer's conversions, ms.
    pub effluent_smoothing_ms: i64,
    /// Analyzer fractions may sum to 1 within this before the sum is an error.
    pub analyzer_sum_tolerance: f64,
    /// Per reaction.
    pub conversions: Vec<ConversionConfig>,
    /// Reactor pressure.
    pub pressure: Option<Signal>,
    /// Ambient temperature.
    pub ambient: Option<Signal>,
    /// Bubble-point margin, K.
    pub bubble_margin: f64,
    /// Reaction of the apparent-conversion soft tag.
    pub apparent_reaction: Option<usize>,
    /// Validity flags that are shown but raise no `model_validity` alert (reviewed
    /// extrapolations of a correlation beyond its published range).
    pub accepted_flags: Vec<String>,
    /// Alert lifecycle.
    pub alerts: AlertConfig,
    /// Monitoring.
    pub monitor: MonitorConfig,
    /// Informational tags: (soft-tag column name, tag index), in configuration order.
    pub info: Vec<(String, usize)>,
}

impl UnitSpec {
    /// The unit in which the measured effluent temperature is written (soft tags use it).
    pub fn temperature_unit(&self) -> Unit {
        self.tags[self.effluent_temperature].unit
    }

    /// The informational tags (read, checked and written to the soft tags, never used by the
    /// balance), in the order of `[unit.info]`: (column name, tag index).
    pub fn info_columns(&self) -> impl Iterator<Item = (&str, usize)> {
        self.info.iter().map(|(name, i)| (name.as_str(), *i))
    }

    /// Index of a tag by name.
    pub fn tag_index(&self, name: &str) -> Option<usize> {
        self.tags.iter().position(|t| t.name == name)
    }
}

/// A standard uncertainty: absolute (SI) or relative to the value.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Uncertainty {
    /// None given.
    None,
    /// Absolute, SI.
    Absolute(f64),
    /// Fraction of the value.
    Relative(f64),
}

impl Uncertainty {
    /// The absolute uncertainty at an SI value.
    pub fn at(self, si: f64) -> f64 {
        match self {
            Uncertainty::None => 0.0,
            Uncertainty::Absolute(u) => u,
            Uncertainty::Relative(r) => r * si.abs(),
        }
    }
}

/// One tag a unit reads.
#[derive(Debug, Clone)]
pub struct TagConfig {
    /// Tag name as in the files.
    pub name: String,
    /// Its engineering unit (values are converted to SI with it; a gauge pressure carries the
    /// site's atmospheric pressure).
    pub unit: Unit,
    /// Aggregation.
    pub kind: TagKind,
    /// Stale after, ms.
    pub stale_after_ms: i64,
    /// Valid range, in the tag's own unit.
    pub range: Option<(f64, f64)>,
    /// Standard uncertainty.
    pub uncertainty: Uncertainty,
    /// Whether interval closing waits for this tag.
    pub required: bool,
    /// What it is, e.g. "ester recycle flow".
    pub role: String,
    /// Only informational (`[unit.info]`): read and checked, written to the soft tags, but
    /// used by neither the balance nor the monitor, and its data quality raises no alert.
    pub info: bool,
}

/// Where a model input comes from.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Signal {
    /// A tag of the unit (index into [`UnitSpec::tags`]).
    Tag(usize),
    /// A fixed SI value with its standard uncertainty.
    Fixed {
        /// Value, SI.
        si: f64,
        /// Standard uncertainty, SI.
        u: f64,
    },
}

/// A feed of a unit.
#[derive(Debug, Clone)]
pub struct FeedConfig {
    /// Label.
    pub name: String,
    /// Total flow.
    pub flow: Signal,
    /// Whether the flow is a mass flow.
    pub mass_flow: bool,
    /// Temperature.
    pub temperature: Signal,
    /// Fraction signal per system component (`Fixed { si: 0 }` when absent).
    pub composition: Vec<Signal>,
    /// Basis of the fractions.
    pub basis: Basis,
    /// Rescale fractions not summing to 1.
    pub normalize: bool,
    /// Standard uncertainty of fixed fractions that state none (absolute), used where an
    /// effluent analyzer is reconciled with the feed.
    pub composition_uncertainty: f64,
}

/// A reaction's conversion settings.
#[derive(Debug, Clone)]
pub struct ConversionConfig {
    /// Design conversion used in the prediction when no tag is mapped.
    pub design: f64,
    /// Its standard uncertainty.
    pub u: f64,
    /// Measured conversion tag.
    pub tag: Option<Signal>,
}
