//! Site configuration (`efftemp run/check/replay --config FILE`).
//!
//! Two stages, as for the `calc` case file: [`RawSite`] mirrors the TOML exactly
//! (`deny_unknown_fields`), then [`SiteConfig::load`] resolves includes, units, time zones,
//! durations, tag mappings and the thermodynamic system of every reactor unit, and reports
//! **every** problem with file, line and key. `efftemp check` prints them and exits 2.

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use indexmap::IndexMap;
use jiff::tz::TimeZone;
use serde::Deserialize;

use crate::core::alerts::AlertConfig;
use crate::core::spec::{ConversionConfig, FeedConfig, Signal, TagConfig, Uncertainty, UnitSpec};
use crate::core::vocabulary::TagKind;
use crate::ingest::settings::{InputConfig, Layout, TimestampFormat, WatchMode};
use crate::source::{KeyPath, LocatedError, LocatedErrors, SourceText};
use crate::thermo::balance::{Basis, DEFAULT_BOUNDS, PathChoice, Reaction, System};
use crate::thermo::component::{ComponentSpec, Library, Origin, normalize_id};
use crate::units::{self, Number, Quantity};

// ---------------------------------------------------------------------------------------------
// Stage one: the serde mirror.

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
    /// Address of the health and metrics endpoint ("127.0.0.1:9464"; "off" to disable).
    pub http_address: Option<String>,
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

/// Whether one of two directories contains the other (or they are the same), comparing
/// resolved paths where they exist and the paths as written otherwise.
fn same_tree(a: &Path, b: &Path) -> bool {
    let a = std::fs::canonicalize(a).unwrap_or_else(|_| a.to_path_buf());
    let b = std::fs::canonicalize(b).unwrap_or_else(|_| b.to_path_buf());
    a.starts_with(&b) || b.starts_with(&a)
}

/// `[unit.timing]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RawTiming {
    /// Interval length, e.g. "1m".
    pub interval: Option<String>,
    /// How long to wait for late data, in event time and in wall time of a stalled stream.
    pub max_wait: Option<String>,
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

// ---------------------------------------------------------------------------------------------
// Stage two: the checked model.

/// `[service]`, checked.
#[derive(Debug, Clone)]
pub struct ServiceConfig {
    /// Reconcile interval, ms.
    pub reconcile_ms: u64,
    /// Watch mode.
    pub watch: WatchMode,
    /// Longest record, bytes.
    pub max_record_bytes: usize,
    /// Seal quiet period, ms.
    pub seal_after_ms: u64,
    /// Print alerts on stdout.
    pub alerts_to_stdout: bool,
    /// Checkpoint interval, ms.
    pub checkpoint_ms: u64,
    /// Health and metrics endpoint, if enabled.
    pub http_address: Option<std::net::SocketAddr>,
}

/// A reactor unit, checked: what ingestion reads ([`InputConfig`]) and what the core computes
/// with ([`UnitSpec`]).
#[derive(Debug, Clone)]
pub struct UnitConfig {
    /// Description.
    pub description: String,
    /// The file that defined it.
    pub source: Arc<SourceText>,
    /// The time zone's name.
    pub time_zone_name: String,
    /// Input files.
    pub input: InputConfig,
    /// The unit as the core sees it.
    pub spec: UnitSpec,
}

/// A checked site configuration.
#[derive(Debug, Clone)]
pub struct SiteConfig {
    /// The main file and every include.
    pub files: Vec<Arc<SourceText>>,
    /// Site name.
    pub name: String,
    /// State directory.
    pub state_dir: PathBuf,
    /// Output directory.
    pub output_dir: PathBuf,
    /// Service settings.
    pub service: ServiceConfig,
    /// Units.
    pub units: Vec<UnitConfig>,
    /// Shift start times (local wall time of each unit's zone).
    pub shifts: Vec<jiff::civil::Time>,
    /// Write shift reports automatically.
    pub shift_reports: bool,
    /// Syslog forwarding of alert events (`[forward.syslog]`), queue in `<state_dir>/syslog-queue`.
    pub syslog: Option<crate::sinks::syslog::SyslogConfig>,
}

/// Parse a duration like "90s", "5m", "1h 30m" or "PT1M".
pub fn parse_duration_ms(text: &str) -> Result<i64, String> {
    let bad = |e: &dyn std::fmt::Display| {
        format!("`{text}` is not a duration (e.g. \"60s\", \"5m\", \"1h 30m\", \"7d\"): {e}")
    };
    let span: jiff::Span = text.trim().parse().map_err(|e| bad(&e))?;
    // Days (and weeks) are 24 h here: durations in the configuration are elapsed times.
    let ms = span
        .total((jiff::Unit::Millisecond, jiff::SpanRelativeTo::days_are_24_hours()))
        .map_err(|e| bad(&e))?;
    if !ms.is_finite() || ms.fract() != 0.0 {
        return Err(format!("duration `{text}` must be a whole number of milliseconds"));
    }
    #[allow(clippy::cast_possible_truncation)]
    let ms = ms as i128;
    if ms <= 0 {
        return Err(format!("duration `{text}` must be positive"));
    }
    i64::try_from(ms).map_err(|_| format!("duration `{text}` is too long"))
}

/// Resolve an IANA time-zone name.
pub fn parse_time_zone(name: &str) -> Result<TimeZone, String> {
    TimeZone::get(name.trim())
        .map_err(|e| format!("unknown time zone `{name}` (an IANA name like \"Europe/London\"): {e}"))
}

struct Ck<'a> {
    src: &'a SourceText,
    errors: &'a mut Vec<LocatedError>,
}

impl Ck<'_> {
    fn err(&mut self, key: &KeyPath, msg: impl Into<String>) {
        self.errors.push(self.src.error_at(key, msg));
    }
    fn duration(&mut self, key: &KeyPath, v: Option<&String>, default_ms: i64) -> i64 {
        match v {
            None => default_ms,
            Some(t) => parse_duration_ms(t).unwrap_or_else(|e| {
                self.err(key, e);
                default_ms
            }),
        }
    }
}

fn resolve_path(base: &Path, rel: &str) -> PathBuf {
    let p = Path::new(rel);
    if p.is_absolute() { p.to_path_buf() } else { base.join(p) }
}

impl SiteConfig {
    /// Load and check a site configuration with its includes. Every problem is reported.
    pub fn load(path: &Path) -> Result<SiteConfig, LocatedErrors> {
        let main = Arc::new(SourceText::read(path)?);
        let raw: RawSite = main.deserialize()?;
        let mut errors = Vec::new();
        let base = main.path.parent().map(Path::to_path_buf).unwrap_or_default();

        // Includes, depth first, with cycle detection.
        let mut files = vec![main.clone()];
        let mut units: Vec<(RawUnit, Arc<SourceText>, KeyPath)> = raw
            .unit
            .iter()
            .enumerate()
            .map(|(i, u)| (u.clone(), main.clone(), KeyPath::keys("unit").index(i)))
            .collect();
        let mut stack: Vec<(Arc<SourceText>, String, KeyPath, usize)> = raw
            .include
            .iter()
            .enumerate()
            .rev()
            .map(|(i, inc)| (main.clone(), inc.clone(), KeyPath::keys("include").index(i), 0))
            .collect();
        let mut seen: Vec<PathBuf> = vec![std::fs::canonicalize(path).unwrap_or_else(|_| path.to_path_buf())];
        while let Some((from, inc, key, depth)) = stack.pop() {
            let from_dir = from.path.parent().map(Path::to_path_buf).unwrap_or_default();
            let p = resolve_path(&from_dir, &inc);
            let canon = std::fs::canonicalize(&p).unwrap_or_else(|_| p.clone());
            if seen.contains(&canon) || depth > 16 {
                errors.push(from.error_at(&key, format!("include `{inc}` is included twice (a cycle?)")));
                continue;
            }
            seen.push(canon);
            let src = match SourceText::read(&p) {
                Ok(s) => Arc::new(s),
                Err(e) => {
                    errors.push(from.error_at(&key, format!("cannot read include `{inc}`: {}", e.message)));
                    continue;
                }
            };
            match src.deserialize::<RawInclude>() {
                Ok(r) => {
                    for (i, u) in r.unit.into_iter().enumerate() {
                        units.push((u, src.clone(), KeyPath::keys("unit").index(i)));
                    }
                    for (i, nested) in r.include.into_iter().enumerate().rev() {
                        stack.push((src.clone(), nested, KeyPath::keys("include").index(i), depth + 1));
                    }
                }
                Err(e) => errors.push(e),
            }
            files.push(src);
        }

        // Site and service.
        let mut ck = Ck { src: &main, errors: &mut errors };
        let site_tz_name = raw.site.time_zone.clone().unwrap_or_else(|| "UTC".to_string());
        let site_tz = parse_time_zone(&site_tz_name).unwrap_or_else(|e| {
            ck.err(&KeyPath::keys("site.time_zone"), e);
            TimeZone::UTC
        });
        let state_dir = resolve_path(&base, raw.site.state_dir.as_deref().unwrap_or("state"));
        let output_dir = resolve_path(&base, raw.site.output_dir.as_deref().unwrap_or("output"));
        let s = &raw.service;
        let watch = match s.watch.as_deref().unwrap_or("auto") {
            "auto" => WatchMode::Auto,
            "native" => WatchMode::Native,
            "poll" => WatchMode::Poll,
            "off" => WatchMode::Off,
            other => {
                ck.err(
                    &KeyPath::keys("service.watch"),
                    format!("unknown watch mode `{other}`; use auto, native, poll or off"),
                );
                WatchMode::Auto
            }
        };
        let reconcile_ms =
            ck.duration(&KeyPath::keys("service.reconcile_interval"), s.reconcile_interval.as_ref(), 2_000);
        let seal_after_ms = ck.duration(&KeyPath::keys("service.seal_after"), s.seal_after.as_ref(), 600_000);
        let checkpoint_ms =
            ck.duration(&KeyPath::keys("service.checkpoint_interval"), s.checkpoint_interval.as_ref(), 5_000);
        let max_record_bytes = s.max_record_bytes.unwrap_or(65_536);
        if !(256..=64 * 1024 * 1024).contains(&max_record_bytes) {
            ck.err(&KeyPath::keys("service.max_record_bytes"), "must be between 256 bytes and 64 MiB");
        }
        let service = ServiceConfig {
            reconcile_ms: u64::try_from(reconcile_ms).unwrap_or(2_000),
            watch,
            max_record_bytes: usize::try_from(max_record_bytes).unwrap_or(65_536),
            seal_after_ms: u64::try_from(seal_after_ms).unwrap_or(600_000),
            alerts_to_stdout: s.alerts_to_stdout.unwrap_or(false),
            checkpoint_ms: u64::try_from(checkpoint_ms).unwrap_or(5_000),
            http_address: match s.http_address.as_deref().unwrap_or("127.0.0.1:9464") {
                "off" => None,
                a => match a.parse::<std::net::SocketAddr>() {
                    Ok(addr) => Some(addr),
                    Err(_) => {
                        ck.err(
                            &KeyPath::keys("service.http_address"),
                            format!("`{a}` is not an address like \"127.0.0.1:9464\" (or \"off\")"),
                        );
                        None
                    }
                },
            },
        };

        let syslog = raw.forward.syslog.as_ref().and_then(|s| check_syslog(&mut ck, s, &state_dir));

        // Component library shared by the site.
        let mut library = Library::builtin()?;
        for (i, lib) in raw.site.libraries.iter().enumerate() {
            let p = resolve_path(&base, lib);
            if let Err(e) = library.load(&p) {
                if e.0.iter().any(|le| le.location.line_col.is_none()) {
                    ck.err(
                        &KeyPath::keys("site.libraries").index(i),
                        format!("cannot load library `{lib}`: {e}"),
                    );
                } else {
                    ck.errors.extend(e.0);
                }
            }
        }
        for (id, spec) in &raw.site.components {
            library.add(
                id,
                spec.clone(),
                Origin { source: main.clone(), key: KeyPath::keys("site.components").key(id) },
            );
        }

        if units.is_empty() {
            ck.err(&KeyPath::root(), "no [[unit]] is configured");
        }
        for (i, t) in raw.site.shifts.iter().enumerate() {
            if t.parse::<jiff::civil::Time>().is_err() {
                ck.err(
                    &KeyPath::keys("site.shifts").index(i),
                    format!("`{t}` is not a time of day like \"06:00\""),
                );
            }
        }
        if state_dir == output_dir {
            ck.err(&KeyPath::keys("site.output_dir"), "the output and state directories must differ");
        }
        let mut checked = Vec::new();
        let mut names: HashMap<String, KeyPath> = HashMap::new();
        for (raw_unit, src, key) in &units {
            let mut uck = Ck { src, errors: &mut errors };
            if let Some(name) = &raw_unit.name
                && let Some(prev) = names.insert(name.to_lowercase(), key.clone())
            {
                uck.err(&key.key("name"), format!("unit name `{name}` is used twice (also at `{prev}`)"));
            }
            if let Some(u) = check_unit(&mut uck, raw_unit, src, key, &library, &site_tz, &site_tz_name) {
                // The service must never read what it writes, nor write where it reads.
                let d = &u.input.directory;
                for (what, own) in [("output", &output_dir), ("state", &state_dir)] {
                    if same_tree(d, own) {
                        uck.err(
                            &key.key("input").key("directory"),
                            format!(
                                "the export directory `{}` overlaps the {what} directory `{}`; keep them apart",
                                d.display(),
                                own.display()
                            ),
                        );
                    }
                }
                checked.push(u);
            }
        }
        if !errors.is_empty() {
            // Report in file order: file, then line.
            errors.sort_by(|a, b| {
                (a.location.file.as_os_str(), a.location.line_col)
                    .cmp(&(b.location.file.as_os_str(), b.location.line_col))
            });
            return Err(LocatedErrors(errors));
        }
        Ok(SiteConfig {
            shifts: crate::core::calendar::shift_starts(&raw.site.shifts),
            shift_reports: raw.site.shift_reports.unwrap_or(true),
            files,
            name: raw.site.name.clone().unwrap_or_else(|| "site".to_string()),
            state_dir,
            output_dir,
            service,
            units: checked,
            syslog,
        })
    }
}

/// `[forward.syslog]`, checked; None when it has errors (they are in `ck`).
fn check_syslog(
    ck: &mut Ck<'_>,
    raw: &RawSyslog,
    state_dir: &Path,
) -> Option<crate::sinks::syslog::SyslogConfig> {
    use crate::sinks::syslog::{self, DEFAULT_FACILITY, SyslogConfig, Transport};
    let key = KeyPath::keys("forward.syslog");
    let before = ck.errors.len();
    let address = match &raw.address {
        Some(a) => {
            if let Err(e) = syslog::check_address(a) {
                ck.err(&key.key("address"), e);
            }
            a.trim().to_string()
        }
        None => {
            ck.err(&key, "address is required (host:port of the syslog collector)");
            String::new()
        }
    };
    let transport = match raw.transport.as_deref().map(str::trim) {
        None | Some("tcp") => Transport::Tcp,
        Some("udp") => Transport::Udp,
        Some(other) => {
            ck.err(
                &key.key("transport"),
                format!("unknown transport `{other}`; use \"tcp\" (framed, queued and resent) or \"udp\""),
            );
            Transport::Tcp
        }
    };
    let facility = match &raw.facility {
        None => DEFAULT_FACILITY,
        Some(RawFacility::Number(n)) => match u8::try_from(*n) {
            Ok(f) if f <= 23 => f,
            _ => {
                ck.err(&key.key("facility"), format!("facility {n} is out of range 0..=23"));
                DEFAULT_FACILITY
            }
        },
        Some(RawFacility::Name(name)) => syslog::facility_from_name(name).unwrap_or_else(|| {
            ck.err(
                &key.key("facility"),
                format!("unknown facility `{name}`; use local0 … local7, a name like \"daemon\", or 0..=23"),
            );
            DEFAULT_FACILITY
        }),
    };
    let mut cfg = SyslogConfig::new(address, transport, state_dir.join("syslog-queue"));
    cfg.facility = facility;
    if let Some(a) = &raw.app_name {
        if let Err(e) = syslog::check_app_name(a) {
            ck.err(&key.key("app_name"), e);
        }
        cfg.app_name = a.clone();
    }
    if let Some(h) = &raw.hostname
        && let Err(e) = syslog::check_hostname(h)
    {
        ck.err(&key.key("hostname"), e);
    }
    cfg.hostname = raw.hostname.clone();
    match raw.queue_max {
        Some(0) => ck.err(&key.key("queue_max"), "queue_max must be at least 1"),
        Some(n) => cfg.queue_max = n,
        None => {}
    }
    let min = ck.duration(&key.key("reconnect_min"), raw.reconnect_min.as_ref(), 500);
    let max = ck.duration(&key.key("reconnect_max"), raw.reconnect_max.as_ref(), 60_000);
    if min > max {
        ck.err(
            &key.key("reconnect_min"),
            format!("reconnect_min ({min} ms) is above reconnect_max ({max} ms)"),
        );
    }
    cfg.reconnect_min_ms = u64::try_from(min).unwrap_or(500);
    cfg.reconnect_max_ms = u64::try_from(max).unwrap_or(60_000);
    (ck.errors.len() == before).then_some(cfg)
}

/// Builds the tag table of a unit while signals are checked.
struct TagTable {
    tags: Vec<TagConfig>,
    default_stale_ms: i64,
    analyzer_stale_ms: i64,
}

impl TagTable {
    /// Check a signal of a quantity (or of `quantities`, first match wins).
    #[allow(clippy::too_many_arguments)]
    fn signal(
        &mut self,
        ck: &mut Ck<'_>,
        key: &KeyPath,
        raw: &RawSignal,
        quantities: &[Quantity],
        role: &str,
        default_kind: TagKind,
        required: bool,
    ) -> Option<(Signal, Quantity)> {
        match raw {
            RawSignal::Fixed(n) => match n.si_any(quantities) {
                Ok((v, q)) => Some((Signal::Fixed { si: v, u: 0.0 }, q)),
                Err(e) => {
                    ck.err(key, e.to_string());
                    None
                }
            },
            RawSignal::Table(t) => match (&t.tag, &t.value) {
                (Some(_), Some(_)) => {
                    ck.err(key, "give either `tag` or `value`, not both");
                    None
                }
                (None, None) => {
                    ck.err(key, "a signal needs `tag` (with `unit`) or `value`");
                    None
                }
                (None, Some(v)) => {
                    let (si, q) = match v.si_any(quantities) {
                        Ok(x) => x,
                        Err(e) => {
                            ck.err(&key.key("value"), e.to_string());
                            return None;
                        }
                    };
                    let u = uncertainty(ck, &key.key("uncertainty"), t.uncertainty.as_ref(), q).at(si);
                    Some((Signal::Fixed { si, u }, q))
                }
                (Some(tag), None) => {
                    let tag = tag.trim().to_string();
                    if tag.is_empty() {
                        ck.err(&key.key("tag"), "tag name is empty");
                        return None;
                    }
                    let unit_text = t.unit.clone().unwrap_or_default();
                    let found =
                        if unit_text.trim().is_empty() && quantities.contains(&Quantity::Dimensionless) {
                            Some(&units::FRACTION)
                        } else {
                            quantities.iter().find_map(|q| units::lookup(*q, unit_text.trim()))
                        };
                    let Some(unit) = found else {
                        let accepted: Vec<&str> =
                            quantities.iter().flat_map(|q| units::accepted(*q)).collect();
                        if t.unit.is_none() {
                            ck.err(key, format!("tag `{tag}` needs a `unit` ({})", accepted.join(", ")));
                        } else {
                            ck.err(
                                &key.key("unit"),
                                format!(
                                    "unknown unit `{unit_text}` for {role}; accepted: {}",
                                    accepted.join(", ")
                                ),
                            );
                        }
                        return None;
                    };
                    let kind = match t.kind.as_deref() {
                        None => default_kind,
                        Some("continuous") => TagKind::Continuous,
                        Some("analyzer") => TagKind::Analyzer,
                        Some(other) => {
                            ck.err(
                                &key.key("kind"),
                                format!("unknown kind `{other}`; use \"continuous\" or \"analyzer\""),
                            );
                            default_kind
                        }
                    };
                    let default_stale = match kind {
                        TagKind::Continuous => self.default_stale_ms,
                        TagKind::Analyzer => self.analyzer_stale_ms,
                    };
                    let stale_after_ms =
                        ck.duration(&key.key("stale_after"), t.stale_after.as_ref(), default_stale);
                    let range = match t.range {
                        None => None,
                        Some([lo, hi]) if lo < hi && lo.is_finite() && hi.is_finite() => Some((lo, hi)),
                        Some([lo, hi]) => {
                            ck.err(
                                &key.key("range"),
                                format!("range must be [low, high] with low < high, got [{lo}, {hi}]"),
                            );
                            None
                        }
                    };
                    let unc = uncertainty(ck, &key.key("uncertainty"), t.uncertainty.as_ref(), unit.quantity);
                    if let Some(i) = self.tags.iter().position(|x| x.name == tag) {
                        if self.tags[i].unit.symbol != unit.symbol {
                            ck.err(
                                &key.key("unit"),
                                format!(
                                    "tag `{tag}` is also used as {} in {}",
                                    self.tags[i].role, self.tags[i].unit.symbol
                                ),
                            );
                        }
                        self.tags[i].required |= required;
                        return Some((Signal::Tag(i), unit.quantity));
                    }
                    self.tags.push(TagConfig {
                        name: tag,
                        unit,
                        kind,
                        stale_after_ms,
                        range,
                        uncertainty: unc,
                        required: required && kind == TagKind::Continuous,
                        role: role.to_string(),
                    });
                    Some((Signal::Tag(self.tags.len() - 1), unit.quantity))
                }
            },
        }
    }
}

fn uncertainty(ck: &mut Ck<'_>, key: &KeyPath, raw: Option<&Number>, q: Quantity) -> Uncertainty {
    let Some(n) = raw else { return Uncertainty::None };
    let q = if q == Quantity::Temperature { Quantity::TemperatureDifference } else { q };
    let res = match n {
        Number::Text(t) if t.trim().ends_with('%') && q != Quantity::Dimensionless => {
            Number::Text(t.clone()).si(Quantity::Dimensionless).map(Uncertainty::Relative)
        }
        _ => n.si(q).map(Uncertainty::Absolute),
    };
    match res {
        Ok(Uncertainty::Absolute(u) | Uncertainty::Relative(u)) if u < 0.0 => {
            ck.err(key, "a standard uncertainty cannot be negative");
            Uncertainty::None
        }
        Ok(u) => u,
        Err(e) => {
            ck.err(key, e.to_string());
            Uncertainty::None
        }
    }
}

fn basis(ck: &mut Ck<'_>, key: &KeyPath, v: Option<&String>) -> Basis {
    match v.map(String::as_str) {
        None | Some("mole") => Basis::Mole,
        Some("mass") => Basis::Mass,
        Some(other) => {
            ck.err(key, format!("unknown basis `{other}`; use \"mole\" or \"mass\""));
            Basis::Mole
        }
    }
}

fn check_unit(
    ck: &mut Ck<'_>,
    raw: &RawUnit,
    src: &Arc<SourceText>,
    key: &KeyPath,
    site_library: &Library,
    site_tz: &TimeZone,
    site_tz_name: &str,
) -> Option<UnitConfig> {
    let errors_before = ck.errors.len();
    let name = match &raw.name {
        Some(n) if !n.is_empty() && n.chars().all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_') => {
            n.clone()
        }
        Some(n) => {
            ck.err(
                &key.key("name"),
                format!("unit name `{n}` may contain only letters, digits, '-' and '_'"),
            );
            n.clone()
        }
        None => {
            ck.err(key, "name is required");
            "unit".into()
        }
    };
    let base = src.path.parent().map(Path::to_path_buf).unwrap_or_default();
    let (time_zone, time_zone_name) = match &raw.time_zone {
        None => (site_tz.clone(), site_tz_name.to_string()),
        Some(z) => match parse_time_zone(z) {
            Ok(tz) => (tz, z.clone()),
            Err(e) => {
                ck.err(&key.key("time_zone"), e);
                (TimeZone::UTC, "UTC".into())
            }
        },
    };

    // Input.
    let ik = key.key("input");
    let inp = &raw.input;
    let directory = match &inp.directory {
        Some(d) => resolve_path(&base, d),
        None => {
            ck.err(&ik, "directory is required (the export directory)");
            PathBuf::new()
        }
    };
    let pattern = inp.pattern.clone().unwrap_or_else(|| "*.csv".to_string());
    if pattern.contains('/') {
        ck.err(&ik.key("pattern"), "pattern matches file names only; put directories in `directory`");
    }
    let layout = match inp.layout.as_deref().unwrap_or("wide") {
        "wide" => Layout::Wide,
        "long" => Layout::Long {
            tag: inp.tag_column.clone().unwrap_or_else(|| "tag".into()),
            value: inp.value_column.clone().unwrap_or_else(|| "value".into()),
            quality: inp.quality_column.clone(),
        },
        other => {
            ck.err(&ik.key("layout"), format!("unknown layout `{other}`; use \"wide\" or \"long\""));
            Layout::Wide
        }
    };
    let timestamp_format = match inp.timestamp_format.as_deref().unwrap_or("rfc3339") {
        "rfc3339" => TimestampFormat::Rfc3339,
        f => {
            if !f.contains('%') {
                ck.err(
                    &ik.key("timestamp_format"),
                    format!("`{f}` is neither \"rfc3339\" nor a strftime format like \"%Y-%m-%d %H:%M:%S\""),
                );
            } else if let Err(e) = jiff::civil::DateTime::strptime(
                f,
                jiff::civil::date(2026, 1, 2).at(3, 4, 5, 0).strftime(f).to_string(),
            ) {
                ck.err(
                    &ik.key("timestamp_format"),
                    format!("format `{f}` cannot describe a date and time: {e}"),
                );
            }
            TimestampFormat::Local(f.to_string())
        }
    };
    let input_tz = match &inp.time_zone {
        None => time_zone.clone(),
        Some(z) => parse_time_zone(z).unwrap_or_else(|e| {
            ck.err(&ik.key("time_zone"), e);
            TimeZone::UTC
        }),
    };
    let reject_unknown_tags = match inp.unknown_tags.as_deref().unwrap_or("reject") {
        "reject" => true,
        "ignore" => false,
        other => {
            ck.err(&ik.key("unknown_tags"), format!("use \"reject\" or \"ignore\", not `{other}`"));
            true
        }
    };
    let input = InputConfig {
        directory,
        pattern,
        layout,
        timestamp_column: inp.timestamp_column.clone().unwrap_or_else(|| "timestamp".into()),
        timestamp_format,
        time_zone: input_tz,
        reject_unknown_tags,
        links_outside: inp.links_outside.unwrap_or(false),
    };

    // Timing.
    let tk = key.key("timing");
    let interval_ms = ck.duration(&tk.key("interval"), raw.timing.interval.as_ref(), 60_000);
    if interval_ms < 1_000 || 86_400_000 % interval_ms != 0 {
        ck.err(
            &tk.key("interval"),
            "interval must be at least 1 s and divide a day evenly (e.g. 10s, 1m, 5m, 1h)",
        );
    }
    let max_wait_ms =
        ck.duration(&tk.key("max_wait"), raw.timing.max_wait.as_ref(), 5 * interval_ms.max(60_000));
    let mut tags = TagTable {
        tags: Vec::new(),
        default_stale_ms: ck.duration(
            &tk.key("stale_after"),
            raw.timing.stale_after.as_ref(),
            5 * interval_ms.max(60_000),
        ),
        analyzer_stale_ms: ck.duration(
            &tk.key("analyzer_stale_after"),
            raw.timing.analyzer_stale_after.as_ref(),
            45 * 60_000,
        ),
    };

    // Components in order of first use.
    let mut library = site_library.clone();
    for (id, spec) in &raw.components {
        library.add(id, spec.clone(), Origin { source: src.clone(), key: key.key("components").key(id) });
    }
    let mut ids: Vec<(String, KeyPath)> = Vec::new();
    let mut note = |id: &str, k: KeyPath| {
        if !ids.iter().any(|(x, _)| normalize_id(x) == normalize_id(id)) {
            ids.push((id.to_string(), k));
        }
    };
    for (j, f) in raw.feed.iter().enumerate() {
        for id in f.composition.keys() {
            note(id, key.key("feed").index(j).key("composition").key(id));
        }
    }
    for (r, re) in raw.reaction.iter().enumerate() {
        for id in re.stoichiometry.keys() {
            note(id, key.key("reaction").index(r).key("stoichiometry").key(id));
        }
    }
    if let Some(c) = &raw.effluent.composition {
        for id in c.keys() {
            note(id, key.key("effluent.composition").key(id));
        }
    }
    let index_of = |id: &str| ids.iter().position(|(x, _)| normalize_id(x) == normalize_id(id));
    let mut components = Vec::new();
    for (id, k) in &ids {
        if !library.contains(id) {
            ck.errors.push(library.unknown(id, src, k));
        } else {
            match library.resolve(id) {
                Ok(c) => components.push(c),
                Err(e) => ck.errors.extend(e.0),
            }
        }
    }
    let n = ids.len();

    // Feeds.
    if raw.feed.is_empty() {
        ck.err(key, "at least one [[unit.feed]] is required");
    }
    let mut feeds = Vec::new();
    for (j, f) in raw.feed.iter().enumerate() {
        let fk = key.key("feed").index(j);
        let fname = f.name.clone().unwrap_or_else(|| format!("feed {}", j + 1));
        let flow = match &f.flow {
            Some(s) => tags.signal(
                ck,
                &fk.key("flow"),
                s,
                &[Quantity::MolarFlow, Quantity::MassFlow],
                &format!("{fname} flow"),
                TagKind::Continuous,
                true,
            ),
            None => {
                ck.err(&fk, "flow is required");
                None
            }
        };
        let temperature = match &f.temperature {
            Some(s) => tags.signal(
                ck,
                &fk.key("temperature"),
                s,
                &[Quantity::Temperature],
                &format!("{fname} temperature"),
                TagKind::Continuous,
                true,
            ),
            None => {
                ck.err(&fk, "temperature is required");
                None
            }
        };
        if f.composition.is_empty() {
            ck.err(&fk, "composition is required (analyzer tags or fixed fractions)");
        }
        let mut composition = vec![Signal::Fixed { si: 0.0, u: 0.0 }; n];
        let mut fixed_sum = 0.0;
        let mut all_fixed = true;
        for (id, s) in &f.composition {
            let role = format!("{fname} {id} fraction");
            if let Some((sig, _)) = tags.signal(
                ck,
                &fk.key("composition").key(id),
                s,
                &[Quantity::Dimensionless],
                &role,
                TagKind::Analyzer,
                false,
            ) {
                match sig {
                    Signal::Fixed { si, .. } => {
                        if !(0.0..=1.0).contains(&si) {
                            ck.err(
                                &fk.key("composition").key(id),
                                format!("fraction must be within 0..1, got {si}"),
                            );
                        }
                        fixed_sum += si;
                    }
                    Signal::Tag(_) => all_fixed = false,
                }
                if let Some(i) = index_of(id) {
                    composition[i] = sig;
                }
            }
        }
        if all_fixed
            && !f.composition.is_empty()
            && (fixed_sum - 1.0).abs() > 1e-3
            && !f.normalize.unwrap_or(false)
        {
            ck.err(
                &fk.key("composition"),
                format!("fixed fractions sum to {fixed_sum:.6}, not 1; fix them or set normalize = true"),
            );
        }
        let b = basis(ck, &fk.key("basis"), f.basis.as_ref());
        if let (Some((flow, fq)), Some((temperature, _))) = (flow, temperature) {
            feeds.push(FeedConfig {
                name: fname,
                flow,
                mass_flow: fq == Quantity::MassFlow,
                temperature,
                composition,
                basis: b,
                normalize: f.normalize.unwrap_or(true),
            });
        }
    }

    // Heater, effluent, reactions, ambient.
    let hk = key.key("heater");
    let duty = match &raw.heater.duty {
        Some(s) => tags
            .signal(ck, &hk.key("duty"), s, &[Quantity::Power], "heater duty", TagKind::Continuous, true)
            .map(|x| x.0),
        None => {
            ck.err(&hk, "duty is required (the reported heater duty)");
            None
        }
    };
    let heat_loss = match &raw.heater.heat_loss {
        Some(s) => tags
            .signal(ck, &hk.key("heat_loss"), s, &[Quantity::Power], "heat loss", TagKind::Continuous, false)
            .map(|x| x.0),
        None => Some(Signal::Fixed { si: 0.0, u: 0.0 }),
    };
    let ek = key.key("effluent");
    let effluent_temperature = match &raw.effluent.temperature {
        Some(s) => match tags.signal(
            ck,
            &ek.key("temperature"),
            s,
            &[Quantity::Temperature],
            "effluent temperature",
            TagKind::Continuous,
            true,
        ) {
            Some((Signal::Tag(i), _)) => Some(i),
            Some(_) => {
                ck.err(
                    &ek.key("temperature"),
                    "the effluent temperature must be a tag (it is what the prediction is compared with)",
                );
                None
            }
            None => None,
        },
        None => {
            ck.err(&ek, "temperature is required (the measured effluent temperature tag)");
            None
        }
    };
    let effluent_composition = raw.effluent.composition.as_ref().map(|c| {
        let mut sigs = vec![Signal::Fixed { si: 0.0, u: 0.0 }; n];
        for (id, s) in c {
            if let Some((sig, _)) = tags.signal(
                ck,
                &ek.key("composition").key(id),
                s,
                &[Quantity::Dimensionless],
                &format!("effluent {id} fraction"),
                TagKind::Analyzer,
                false,
            ) && let Some(i) = index_of(id)
            {
                sigs[i] = sig;
            }
        }
        (sigs, basis(ck, &ek.key("basis"), raw.effluent.basis.as_ref()))
    });
    let mut reactions = Vec::new();
    let mut conversions = Vec::new();
    for (r, re) in raw.reaction.iter().enumerate() {
        let rk = key.key("reaction").index(r);
        let mut nu = vec![0.0; n];
        for (id, c) in &re.stoichiometry {
            if let Some(i) = index_of(id) {
                nu[i] += c;
            }
        }
        let key_idx = match &re.key {
            Some(k) if re.stoichiometry.keys().any(|s| normalize_id(s) == normalize_id(k)) => index_of(k),
            Some(k) => {
                ck.err(&rk.key("key"), format!("key `{k}` is not in this reaction's stoichiometry"));
                None
            }
            None => {
                ck.err(&rk, "key is required (the reactant whose conversion is tracked)");
                None
            }
        };
        let design = re.design_conversion.unwrap_or_else(|| {
            ck.err(&rk, "design_conversion is required (used when no conversion tag is mapped or it is bad)");
            0.0
        });
        if !(0.0..=1.0).contains(&design) {
            ck.err(&rk.key("design_conversion"), format!("conversion must be within 0..1, got {design}"));
        }
        let tag = re.conversion.as_ref().and_then(|s| {
            tags.signal(
                ck,
                &rk.key("conversion"),
                s,
                &[Quantity::Dimensionless],
                &format!("reaction {} conversion", r + 1),
                TagKind::Analyzer,
                false,
            )
            .map(|x| x.0)
        });
        if let Some(k) = key_idx {
            let label = re.name.clone().unwrap_or_else(|| format!("reaction {}", r + 1));
            reactions.push(Reaction { label, nu, key: k });
            conversions.push(ConversionConfig { design, u: re.conversion_uncertainty.unwrap_or(0.0), tag });
        }
    }
    if effluent_composition.is_some() && !raw.reaction.is_empty() {
        ck.err(
            &ek.key("composition"),
            "an effluent analyzer replaces the reactions in the balance; remove one of them",
        );
    }
    let ambient = raw.ambient.temperature.as_ref().and_then(|s| {
        tags.signal(
            ck,
            &key.key("ambient.temperature"),
            s,
            &[Quantity::Temperature],
            "ambient temperature",
            TagKind::Continuous,
            false,
        )
        .map(|x| x.0)
    });

    // Model settings.
    let mk = key.key("model");
    let m = &raw.model;
    let global = match m.enthalpy.as_deref() {
        None => PathChoice::Auto,
        Some(s) => PathChoice::parse(s).unwrap_or_else(|| {
            ck.err(
                &mk.key("enthalpy"),
                format!("unknown enthalpy path `{s}`; use \"auto\", \"ideal-gas-watson\" or \"liquid-cp\""),
            );
            PathChoice::Auto
        }),
    };
    let mut choices = vec![global; n];
    for (id, s) in &m.component_enthalpy {
        match (index_of(id), PathChoice::parse(s)) {
            (Some(i), Some(c)) => choices[i] = c,
            (None, _) => ck.err(
                &mk.key("component_enthalpy").key(id),
                format!("component `{id}` is not used by this unit"),
            ),
            (_, None) => {
                ck.err(&mk.key("component_enthalpy").key(id), format!("unknown enthalpy path `{s}`"))
            }
        }
    }
    let pressure = m.pressure.as_ref().and_then(|s| {
        tags.signal(
            ck,
            &mk.key("pressure"),
            s,
            &[Quantity::Pressure],
            "reactor pressure",
            TagKind::Continuous,
            false,
        )
        .map(|x| x.0)
    });
    let bubble_margin = m
        .bubble_margin
        .as_ref()
        .and_then(|b| {
            b.si(Quantity::TemperatureDifference)
                .map_err(|e| ck.err(&mk.key("bubble_margin"), e.to_string()))
                .ok()
        })
        .unwrap_or(crate::config::case::DEFAULT_BUBBLE_MARGIN);
    let bounds = match &m.temperature_range {
        None => DEFAULT_BOUNDS,
        Some([lo, hi]) => match (lo.si(Quantity::Temperature), hi.si(Quantity::Temperature)) {
            (Ok(lo), Ok(hi)) if lo > 0.0 && hi > lo => (lo, hi),
            _ => {
                ck.err(&mk.key("temperature_range"), "must be [low, high] temperatures with 0 < low < high");
                DEFAULT_BOUNDS
            }
        },
    };
    let apparent_reaction = match m.apparent_conversion_reaction {
        None if !reactions.is_empty() => Some(0),
        None => None,
        Some(r) if r >= 1 && r <= raw.reaction.len() => Some(r - 1),
        Some(r) => {
            ck.err(&mk.key("apparent_conversion_reaction"), format!("there is no reaction {r} (1-based)"));
            None
        }
    };
    // Only extrapolations of a correlation can be accepted: a liquid beyond its critical
    // temperature or a two-phase risk is never a reviewed, steady condition.
    let mut accepted_flags = Vec::new();
    for (i, f) in m.accepted_flags.iter().enumerate() {
        let k = mk.key("accepted_flags").index(i);
        match f.split_once(':') {
            Some((kind @ ("range_cp_liq" | "range_cp_ig" | "range_psat"), id)) if let Some(i) = index_of(id) => {
                // The flag's code names the component as the unit first wrote it.
                accepted_flags.push(format!("{kind}:{}", ids[i].0));
            }
            Some(("range_cp_liq" | "range_cp_ig" | "range_psat", id)) => {
                ck.err(&k, format!("component `{id}` is not used by this unit"));
            }
            _ => ck.err(
                &k,
                format!(
                    "`{f}` cannot be accepted: only correlation-range flags (range_cp_liq:<id>, range_cp_ig:<id>, range_psat:<id>) can; two-phase, critical-temperature and balance flags always raise an alert"
                ),
            ),
        }
    }
    let ak = key.key("alerts");
    let alerts = AlertConfig {
        on_delay: raw.alerts.on_delay.unwrap_or(2).max(1),
        off_delay: raw.alerts.off_delay.unwrap_or(3).max(1),
        realert_suppress_ms: ck.duration(
            &ak.key("realert_suppress"),
            raw.alerts.realert_suppress.as_ref(),
            12 * 3_600_000,
        ),
        flood_count: raw.alerts.flood_count.unwrap_or(10).max(2),
        flood_window_ms: ck.duration(&ak.key("flood_window"), raw.alerts.flood_window.as_ref(), 600_000),
        reminder_ms: ck.duration(&ak.key("reminder"), raw.alerts.reminder.as_ref(), 24 * 3_600_000),
        shelve_max_ms: ck.duration(&ak.key("shelve_max"), raw.alerts.shelve_max.as_ref(), 7 * 86_400_000),
    };
    let monitor = check_monitor(ck, &key.key("monitor"), &raw.monitor, interval_ms);

    if ck.errors.len() > errors_before {
        return None;
    }
    let system = match System::new(components, &choices, m.watson_n, reactions, bounds) {
        Ok(s) => s,
        Err(e) => {
            ck.err(&mk, e.to_string());
            return None;
        }
    };
    Some(UnitConfig {
        description: raw.description.clone().unwrap_or_default(),
        source: src.clone(),
        time_zone_name,
        input,
        spec: UnitSpec {
            name,
            time_zone,
            interval_ms,
            max_wait_ms,
            system,
            tags: tags.tags,
            feeds,
            duty: duty?,
            heat_loss: heat_loss?,
            effluent_temperature: effluent_temperature?,
            effluent_composition,
            conversions,
            pressure,
            ambient,
            bubble_margin,
            apparent_reaction,
            accepted_flags,
            alerts,
            monitor,
        },
    })
}

fn check_monitor(
    ck: &mut Ck<'_>,
    key: &KeyPath,
    m: &RawMonitor,
    interval_ms: i64,
) -> crate::core::monitor::settings::MonitorConfig {
    let mut c = crate::core::monitor::settings::MonitorConfig::default();
    if let Some(b) = &m.block {
        let ms = ck.duration(&key.key("block"), Some(b), interval_ms * 10);
        if ms % interval_ms != 0 || ms < interval_ms {
            ck.err(&key.key("block"), "block must be a whole number of intervals");
        }
        c.block_intervals = usize::try_from(ms / interval_ms.max(1)).unwrap_or(10).max(1);
    }
    if let Some(n) = m.baseline_blocks {
        if n < 20 {
            ck.err(
                &key.key("baseline_blocks"),
                "at least 20 blocks are needed for a baseline (200 recommended)",
            );
        }
        c.baseline_blocks = n.max(20);
    }
    c.dead_time_ms = m.dead_time.as_ref().map_or(0, |d| ck.duration(&key.key("dead_time"), Some(d), 0));
    c.lag_ms = m.lag.as_ref().map_or(0, |d| ck.duration(&key.key("lag"), Some(d), 0));
    let mut positive = |name: &str, v: Option<f64>, target: &mut f64| {
        if let Some(x) = v {
            if x > 0.0 && x.is_finite() {
                *target = x;
            } else {
                ck.err(&key.key(name), format!("must be positive, got {x}"));
            }
        }
    };
    positive("false_alert_days", m.false_alert_days, &mut c.false_alert_days);
    positive("cusum_k", m.cusum_k, &mut c.cusum_k);
    positive("ewma_lambda", m.ewma_lambda, &mut c.ewma_lambda);
    positive("shewhart_z", m.shewhart_z, &mut c.shewhart_z);
    positive("enter_z", m.enter_z, &mut c.enter_z);
    positive("clear_z", m.clear_z, &mut c.clear_z);
    positive("effectiveness_limit", m.effectiveness_limit, &mut c.effectiveness_limit);
    positive("min_feed_fraction", m.min_feed_fraction, &mut c.min_feed_fraction);
    if c.ewma_lambda > 1.0 {
        ck.err(&key.key("ewma_lambda"), "must be within (0, 1]");
    }
    if c.clear_z >= c.enter_z {
        ck.err(
            &key.key("clear_z"),
            format!("clear_z ({}) must be below enter_z ({}) to give a deadband", c.clear_z, c.enter_z),
        );
    }
    if let Some(n) = m.clear_blocks {
        c.clear_blocks = n.max(1);
    }
    c.trend_window_ms = ck.duration(&key.key("trend_window"), m.trend_window.as_ref(), c.trend_window_ms);
    c.trend_point_ms = ck.duration(&key.key("trend_point"), m.trend_point.as_ref(), c.trend_point_ms);
    c.ambient_window_ms =
        ck.duration(&key.key("ambient_window"), m.ambient_window.as_ref(), c.ambient_window_ms);
    c.separation_window_ms =
        ck.duration(&key.key("separation_window"), m.separation_window.as_ref(), c.separation_window_ms);
    if let Some(u) = &m.max_prediction_uncertainty {
        match u.si(Quantity::TemperatureDifference) {
            Ok(v) if v > 0.0 => c.max_prediction_uncertainty = v,
            Ok(v) => ck.err(&key.key("max_prediction_uncertainty"), format!("must be positive, got {v}")),
            Err(e) => ck.err(&key.key("max_prediction_uncertainty"), e.to_string()),
        }
    }
    let s = &m.steady_state;
    if let Some([l1, l2, l3]) = s.lambdas {
        if [l1, l2, l3].iter().all(|l| *l > 0.0 && *l <= 1.0) {
            c.ssd.lambda1 = l1;
            c.ssd.lambda2 = l2;
            c.ssd.lambda3 = l3;
        } else {
            ck.err(&key.key("steady_state").key("lambdas"), "filter constants must be within (0, 1]");
        }
    }
    if let Some(v) = s.r_high {
        c.ssd.r_hi = v;
    }
    if let Some(v) = s.r_low {
        c.ssd.r_lo = v;
    }
    if c.ssd.r_lo >= c.ssd.r_hi {
        ck.err(&key.key("steady_state"), "r_low must be below r_high (hysteresis)");
    }
    if let Some(n) = s.steady_count {
        c.ssd.steady_count = n.max(1);
    }
    c
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    #[test]
    fn durations() {
        assert_eq!(parse_duration_ms("90s"), Ok(90_000));
        assert_eq!(parse_duration_ms("5m"), Ok(300_000));
        assert_eq!(parse_duration_ms("1h 30m"), Ok(5_400_000));
        assert!(parse_duration_ms("soon").is_err());
        assert_eq!(parse_duration_ms("7d"), Ok(7 * 86_400_000));
        assert_eq!(parse_duration_ms("2w"), Ok(14 * 86_400_000));
        assert!(parse_duration_ms("1 month").is_err());
        assert!(parse_duration_ms("0s").is_err());
    }
}
