//! Stage one of the site file: a serde mirror of the TOML as written (`deny_unknown_fields`),
//! checked into each stage's settings by [`super::SiteConfig::load`].

use indexmap::IndexMap;
use serde::Deserialize;

use crate::thermo::component::ComponentSpec;
use crate::units::Number;

/// `[site]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawSiteSection {
    /// Site name, for reports.
    pub name: Option<String>,
    /// Default IANA time zone of the units (reports, daily files, local timestamps).
    pub time_zone: Option<String>,
    /// Where the checkpoint and lock live (relative to the config file).
    pub state_dir: Option<String>,
    /// Where soft tags, alerts and reports are written.
    pub output_dir: Option<String>,
    /// Extra component library files.
    #[serde(default)]
    pub libraries: Vec<String>,
    /// Inline components shared by all units.
    #[serde(default)]
    pub components: IndexMap<String, ComponentSpec>,
    /// Local start times of the shifts, e.g. ["06:00", "14:00", "22:00"].
    #[serde(default)]
    pub shifts: Vec<String>,
    /// Write a shift report automatically when a shift ends (default true).
    pub shift_reports: Option<bool>,
    /// The site's atmospheric pressure (absolute), which turns gauge-pressure tags (`barg`,
    /// `psig`, `kPa(g)`, …) into absolute pressure (default 101325 Pa).
    pub atmospheric_pressure: Option<Number>,
}

/// `[service]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawService {
    /// Periodic reconcile pass (the truth; file events are hints), e.g. "2s".
    pub reconcile_interval: Option<String>,
    /// `auto` | `native` | `poll` | `off`.
    pub watch: Option<String>,
    /// Longest accepted CSV record, bytes.
    pub max_record_bytes: Option<u64>,
    /// Quiet time before an export file with a newer sibling is finished.
    pub seal_after: Option<String>,
    /// Also print alert events on standard output.
    pub alerts_to_stdout: Option<bool>,
    /// How often the checkpoint is written at most, e.g. "5s".
    pub checkpoint_interval: Option<String>,
    /// How long one pass may read while the service catches up on a backlog, e.g. "200ms".
    pub catch_up_slice: Option<String>,
    /// Address of the health and metrics endpoint ("127.0.0.1:9464"; "off" to disable).
    pub http_address: Option<String>,
    /// How long outputs are kept.
    #[serde(default)]
    pub retention: RawRetention,
}

/// `[service.retention]`: days of each output kind to keep, e.g. "400d", or "forever".
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawRetention {
    /// Soft-tag files (and the ingest counts of the same days).
    pub soft_tags: Option<String>,
    /// Alert logs.
    pub alerts: Option<String>,
    /// Shift reports.
    pub reports: Option<String>,
}

/// A signal: a tag with its engineering unit, or a fixed value.
#[derive(Debug, Clone, Deserialize)]
#[serde(untagged)]
pub enum RawSignal {
    /// A fixed value: a bare number (SI) or a string with a unit.
    Fixed(Number),
    /// A tag, or a fixed value with an uncertainty.
    Table(RawSignalTable),
}

/// The table form of a signal.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawSignalTable {
    /// Tag name in the export files (ISA-5.1 style, e.g. `TI-2050`).
    pub tag: Option<String>,
    /// Engineering unit of the tag's values (e.g. `degC`, `kmol/h`, `kW`, `%`).
    pub unit: Option<String>,
    /// A fixed value instead of a tag.
    pub value: Option<Number>,
    /// Standard uncertainty: `"1 %"` of the value, or an absolute value with a unit.
    pub uncertainty: Option<Number>,
    /// Valid range `[low, high]` in the tag's unit; values outside are treated as bad.
    pub range: Option<[f64; 2]>,
    /// A value older than this at the end of an interval is stale.
    pub stale_after: Option<String>,
    /// `continuous` (time-weighted mean) or `analyzer` (last value, sample-and-hold).
    pub kind: Option<String>,
}

/// `[unit.input]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawInput {
    /// Export directory (relative to the config file).
    pub directory: Option<String>,
    /// File-name pattern with `*` and `?`.
    pub pattern: Option<String>,
    /// File-name patterns of files not to read although `pattern` matches them.
    pub exclude: Option<Vec<String>>,
    /// `wide` or `long`.
    pub layout: Option<String>,
    /// Name of the timestamp column.
    pub timestamp_column: Option<String>,
    /// `rfc3339` or a strftime-style format of local time, e.g. `%Y-%m-%d %H:%M:%S`.
    pub timestamp_format: Option<String>,
    /// Time zone of local timestamps (defaults to the unit's).
    pub time_zone: Option<String>,
    /// Long layout: the tag column.
    pub tag_column: Option<String>,
    /// Long layout: the value column.
    pub value_column: Option<String>,
    /// Long layout: the quality column (optional).
    pub quality_column: Option<String>,
    /// Rows for tags this unit does not map: `reject` (counted and logged) or `ignore`.
    pub unknown_tags: Option<String>,
    /// Follow symbolic links in the export directory whose target lies outside it (default
    /// false: such links are refused with a warning; links inside the directory are followed).
    pub links_outside: Option<bool>,
}

/// `[unit.timing]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawTiming {
    /// Interval length, e.g. "1m".
    pub interval: Option<String>,
    /// How long to wait for late data, in event time and in wall time of a stalled stream.
    pub max_wait: Option<String>,
    /// How far data must have passed an interval's end before it closes (rows out of order by
    /// less are still used); "0s" closes as soon as every tag has passed the end.
    pub reorder_window: Option<String>,
    /// Default staleness of continuous tags.
    pub stale_after: Option<String>,
    /// Default staleness of analyzer tags.
    pub analyzer_stale_after: Option<String>,
}

/// `[unit.model]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawUnitModel {
    /// `auto` | `ideal-gas-watson` | `liquid-cp`.
    pub enthalpy: Option<String>,
    /// Per-component path.
    #[serde(default)]
    pub component_enthalpy: IndexMap<String, String>,
    /// Default Watson exponent.
    pub watson_n: Option<f64>,
    /// Reactor pressure: a tag or a fixed value.
    pub pressure: Option<RawSignal>,
    /// Warn this close below the ideal bubble point.
    pub bubble_margin: Option<Number>,
    /// Search range for the predicted temperature.
    pub temperature_range: Option<[Number; 2]>,
    /// Which reaction's conversion the apparent-conversion soft tag reports (1-based).
    pub apparent_conversion_reaction: Option<usize>,
    /// Correlation-range flags an engineer has reviewed and accepted (e.g.
    /// `"range_cp_liq:ethylene_oxide"`): still shown in the soft tags, but no alert.
    #[serde(default)]
    pub accepted_flags: Vec<String>,
    /// Analyzer fractions may sum to 1 within this (absolute, e.g. 0.02) before it is an error.
    pub analyzer_sum_tolerance: Option<f64>,
}

/// `[[unit.feed]]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawFeed {
    /// Label.
    pub name: Option<String>,
    /// Total flow (molar or mass).
    pub flow: Option<RawSignal>,
    /// Temperature.
    pub temperature: Option<RawSignal>,
    /// Fractions per component: analyzer tags or fixed design values.
    #[serde(default)]
    pub composition: IndexMap<String, RawSignal>,
    /// `mole` or `mass`.
    pub basis: Option<String>,
    /// Rescale analyzer fractions that do not sum to 1 (flagged when off by more than 1e-3).
    pub normalize: Option<bool>,
    /// Standard uncertainty (absolute fraction) of fixed fractions that state none, for the
    /// reconciliation of an effluent analyzer.
    pub composition_uncertainty: Option<f64>,
}

/// `[unit.heater]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawHeater {
    /// Reported duty into the process.
    pub duty: Option<RawSignal>,
    /// Heat loss (fixed or tag).
    pub heat_loss: Option<RawSignal>,
}

/// `[unit.effluent]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawEffluent {
    /// The measured effluent temperature (a tag).
    pub temperature: Option<RawSignal>,
    /// Optional effluent analyzer.
    pub composition: Option<IndexMap<String, RawSignal>>,
    /// Basis of the effluent analyzer.
    pub basis: Option<String>,
    /// Time constant of the smoothing of the analyzer's conversions, e.g. "2h".
    pub smoothing: Option<String>,
}

/// `[[unit.reaction]]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawUnitReaction {
    /// Label.
    pub name: Option<String>,
    /// Coefficients by component.
    #[serde(default)]
    pub stoichiometry: IndexMap<String, f64>,
    /// Key reactant.
    pub key: Option<String>,
    /// Design conversion of the key reactant.
    pub design_conversion: Option<f64>,
    /// Standard uncertainty of the conversion used in the prediction.
    pub conversion_uncertainty: Option<f64>,
    /// Optional measured conversion (a tag, fraction or %).
    pub conversion: Option<RawSignal>,
}

/// `[unit.ambient]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawAmbient {
    /// Ambient temperature tag (for the heat-loss attribution).
    pub temperature: Option<RawSignal>,
}

/// `[unit.alerts]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawAlerts {
    /// Intervals a condition must persist before an alert is raised.
    pub on_delay: Option<u32>,
    /// Intervals a condition must be absent before the alert clears.
    pub off_delay: Option<u32>,
    /// Do not raise the same alert again within this time (unless it grew by half), e.g. "12h".
    pub realert_suppress: Option<String>,
    /// Group more than this many raises within `flood_window` into one alert.
    pub flood_count: Option<u32>,
    /// Flood window, e.g. "10m".
    pub flood_window: Option<String>,
    /// Remind about alerts active longer than this, e.g. "24h".
    pub reminder: Option<String>,
    /// Longest shelving allowed, e.g. "7d".
    pub shelve_max: Option<String>,
}

/// `[unit.monitor.steady_state]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawSsd {
    /// Filter constants λ1, λ2, λ3 of the R-statistic.
    pub lambdas: Option<[f64; 3]>,
    /// Unsteady above this R.
    pub r_high: Option<f64>,
    /// Steady below this R for `steady_count` intervals.
    pub r_low: Option<f64>,
    /// Consecutive intervals below `r_low`.
    pub steady_count: Option<u32>,
}

/// `[unit.monitor]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawMonitor {
    /// Block length (a multiple of the interval), e.g. "10m".
    pub block: Option<String>,
    /// Steady blocks for the baseline.
    pub baseline_blocks: Option<usize>,
    /// Dead time of the effluent temperature response.
    pub dead_time: Option<String>,
    /// First-order lag of the effluent temperature response.
    pub lag: Option<String>,
    /// Days between false alerts per chart.
    pub false_alert_days: Option<f64>,
    /// CUSUM reference value.
    pub cusum_k: Option<f64>,
    /// EWMA smoothing constant.
    pub ewma_lambda: Option<f64>,
    /// Shewhart limit on block z.
    pub shewhart_z: Option<f64>,
    /// |z| to enter an alert condition.
    pub enter_z: Option<f64>,
    /// |z| to leave it.
    pub clear_z: Option<f64>,
    /// Clean blocks before clearing.
    pub clear_blocks: Option<u32>,
    /// Heater effectiveness at which cleaning is due.
    pub effectiveness_limit: Option<f64>,
    /// Smallest loss of heater effectiveness named as fouling (fraction of the baseline).
    pub min_fouling_loss: Option<f64>,
    /// Smallest change of the key conversion named as a conversion drift.
    pub min_conversion_change: Option<f64>,
    /// Trend window, e.g. "14d".
    pub trend_window: Option<String>,
    /// Trend point spacing, e.g. "4h".
    pub trend_point: Option<String>,
    /// Ambient-correlation window, e.g. "3d".
    pub ambient_window: Option<String>,
    /// Window of the fouling/conversion separation, e.g. "24h".
    pub separation_window: Option<String>,
    /// Suppress statistical alerts above this prediction uncertainty.
    pub max_prediction_uncertainty: Option<Number>,
    /// Pause below this fraction of the baseline feed.
    pub min_feed_fraction: Option<f64>,
    /// Steady-state detection settings.
    #[serde(default)]
    pub steady_state: RawSsd,
}

/// `[[unit]]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawUnit {
    /// Unit name (used in file names and alert ids): letters, digits, `-`, `_`.
    pub name: Option<String>,
    /// Description.
    pub description: Option<String>,
    /// Time zone (defaults to the site's).
    pub time_zone: Option<String>,
    /// Input files.
    #[serde(default)]
    pub input: RawInput,
    /// Intervals.
    #[serde(default)]
    pub timing: RawTiming,
    /// Model settings.
    #[serde(default)]
    pub model: RawUnitModel,
    /// Inline components for this unit.
    #[serde(default)]
    pub components: IndexMap<String, ComponentSpec>,
    /// Feeds.
    #[serde(default)]
    pub feed: Vec<RawFeed>,
    /// Heater.
    #[serde(default)]
    pub heater: RawHeater,
    /// Effluent.
    #[serde(default)]
    pub effluent: RawEffluent,
    /// Reactions.
    #[serde(default)]
    pub reaction: Vec<RawUnitReaction>,
    /// Ambient.
    #[serde(default)]
    pub ambient: RawAmbient,
    /// Alert settings.
    #[serde(default)]
    pub alerts: RawAlerts,
    /// Monitoring settings.
    #[serde(default)]
    pub monitor: RawMonitor,
    /// Informational tags: each key names a soft-tag column (after the documented ones); the
    /// tag is read and checked like any other, but used by no computation.
    #[serde(default)]
    pub info: IndexMap<String, RawSignal>,
}

/// A syslog facility: a name (`"local0"`, `"daemon"`) or a number 0–23.
#[derive(Debug, Clone, Deserialize)]
#[serde(untagged)]
pub enum RawFacility {
    /// A facility number.
    Number(i64),
    /// A facility name.
    Name(String),
}

/// `[forward.syslog]`: alert events to a syslog collector (see [`crate::sinks::syslog`]).
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawSyslog {
    /// Collector `host:port`.
    pub address: Option<String>,
    /// `tcp` (default; framed, queued and resent) or `udp`.
    pub transport: Option<String>,
    /// Facility name or number (default `local0`).
    pub facility: Option<RawFacility>,
    /// APP-NAME (default `efftemp`).
    pub app_name: Option<String>,
    /// HOSTNAME (default: the machine's host name).
    pub hostname: Option<String>,
    /// Most events queued while the collector is unreachable (default 10000).
    pub queue_max: Option<usize>,
    /// First reconnect delay, e.g. "500ms".
    pub reconnect_min: Option<String>,
    /// Longest reconnect delay, e.g. "1m".
    pub reconnect_max: Option<String>,
}

/// `[forward]`: where alert events are sent besides the alert file.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawForward {
    /// Syslog collector.
    pub syslog: Option<RawSyslog>,
}

/// The main site file.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawSite {
    /// Files with more `[[unit]]` tables (relative to this file).
    #[serde(default)]
    pub include: Vec<String>,
    /// Site settings.
    #[serde(default)]
    pub site: RawSiteSection,
    /// Service settings.
    #[serde(default)]
    pub service: RawService,
    /// Units.
    #[serde(default)]
    pub unit: Vec<RawUnit>,
    /// Forwarding of alert events.
    #[serde(default)]
    pub forward: RawForward,
}

/// An included file: more units and includes only.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawInclude {
    /// Nested includes.
    #[serde(default)]
    pub include: Vec<String>,
    /// Units.
    #[serde(default)]
    pub unit: Vec<RawUnit>,
}
