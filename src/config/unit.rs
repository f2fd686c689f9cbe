//! One `[[unit]]` of the site file, checked section by section into what ingestion reads
//! ([`InputConfig`]) and what the core computes with ([`UnitSpec`]).
//!
//! The sections are checked in a fixed order (input, timing, components, feeds, heater,
//! effluent, reactions, ambient, model, alerts, monitor, info): the tag table grows in that
//! order, which gives every tag its index (the informational tags come last).

use std::path::{Path, PathBuf};
use std::sync::Arc;

use jiff::tz::TimeZone;

use indexmap::IndexMap;

use super::check::{Checker, Percent, Range, parse_duration_ms, parse_time_zone, resolve_path};
use super::raw::{
    RawAlerts, RawEffluent, RawFeed, RawHeater, RawInput, RawMonitor, RawSignal, RawSignalTable, RawSsd,
    RawTiming, RawUnit, RawUnitModel, RawUnitReaction,
};
use crate::core::alerts::AlertConfig;
use crate::core::monitor::settings::MonitorConfig;
use crate::core::spec::{ConversionConfig, FeedConfig, Signal, TagConfig, Uncertainty, UnitSpec};
use crate::core::vocabulary::TagKind;
use crate::ingest::settings::{InputConfig, Layout, TimestampFormat};
use crate::source::{KeyPath, LocatedError, SourceText};
use crate::thermo::Component;
use crate::thermo::balance::{Basis, DEFAULT_BOUNDS, PathChoice, Reaction, System};
use crate::thermo::component::{Library, Origin, normalize_id};
use crate::units::{self, Number, Quantity, Unit};

/// A reactor unit, checked: what ingestion reads ([`InputConfig`]) and what the core computes
/// with ([`UnitSpec`]).
#[derive(Debug, Clone)]
pub struct UnitConfig {
    /// Description.
    pub description: String,
    /// The file that defined it.
    pub source: Arc<SourceText>,
    /// Its key path in that file (`unit[2]`), for located messages.
    pub key: KeyPath,
    /// The time zone's name.
    pub time_zone_name: String,
    /// Input files.
    pub input: InputConfig,
    /// The unit as the core sees it.
    pub spec: UnitSpec,
    /// Located remarks that are not errors (`check` prints them), e.g. an unset dead time.
    pub notes: Vec<LocatedError>,
}

impl UnitConfig {
    /// A located warning when the unit's export directory cannot be read now: not an error,
    /// since a site may create it after the configuration, but nothing is read until then.
    pub fn directory_warning(&self) -> Option<LocatedError> {
        let dir = &self.input.directory;
        let problem = match std::fs::metadata(dir) {
            Ok(m) if m.is_dir() => match std::fs::read_dir(dir) {
                Ok(_) => return None,
                Err(e) => format!("cannot be read ({e})"),
            },
            Ok(_) => "is not a directory".to_string(),
            Err(e) if e.kind() == std::io::ErrorKind::NotFound => "does not exist".to_string(),
            Err(e) => format!("cannot be read ({e})"),
        };
        let key = self.key.key("input").key("directory");
        Some(self.source.error_at(
            &key,
            format!(
                "unit {}: export directory {} {problem}; nothing is read (and `run` is not ready) until it exists",
                self.spec.name,
                dir.display()
            ),
        ))
    }
}

/// Check one unit; None when it has errors (they are in `ck`).
pub(crate) fn check_unit(
    ck: &mut Checker<'_>,
    raw: &RawUnit,
    src: &Arc<SourceText>,
    key: &KeyPath,
    site_library: &Library,
    site_tz: &TimeZone,
    site_tz_name: &str,
) -> Option<UnitConfig> {
    let errors_before = ck.count();
    let name = unit_name(ck, key, raw.name.as_ref());
    let base = src.path.parent().map(Path::to_path_buf).unwrap_or_default();
    let (time_zone, time_zone_name) = match &raw.time_zone {
        None => (site_tz.clone(), site_tz_name.to_string()),
        Some(z) => unit_time_zone(ck, &key.key("time_zone"), z),
    };
    let input = input(ck, &key.key("input"), &raw.input, &base, &time_zone);
    let (interval_ms, max_wait_ms, reorder_ms, mut tags) = timing(ck, &key.key("timing"), &raw.timing);
    let comps = components(ck, raw, src, key, site_library);
    let feeds = feeds(ck, &mut tags, key, &raw.feed, &comps);
    let (duty, heat_loss) = heater(ck, &mut tags, &key.key("heater"), &raw.heater);
    let ek = key.key("effluent");
    let effluent_temperature = effluent_temperature(ck, &mut tags, &ek, &raw.effluent);
    let effluent_composition = effluent_composition(ck, &mut tags, &ek, &raw.effluent, &comps);
    let (reactions, conversions) = reactions(ck, &mut tags, key, &raw.reaction, &comps);
    if effluent_composition.is_some() && raw.reaction.is_empty() {
        ck.err(
            &ek.key("composition"),
            "an effluent analyzer measures the extents of the unit's reactions: add their [[unit.reaction]] entries (stoichiometry, key, design_conversion)",
        );
    }
    let effluent_smoothing_ms =
        ck.duration(&ek.key("smoothing"), raw.effluent.smoothing.as_ref(), 2 * 3_600_000);
    let ambient = raw.ambient.temperature.as_ref().and_then(|s| {
        let role = "ambient temperature";
        let k = key.key("ambient.temperature");
        let sig = tags.signal(ck, &k, s, &[Quantity::Temperature], role, TagKind::Continuous, false)?.0;
        fixed_positive(ck, &k, sig);
        Some(sig)
    });
    let mk = key.key("model");
    let model = model(ck, &mut tags, &mk, &raw.model, &comps, (reactions.len(), raw.reaction.len()));
    let alerts = alerts(ck, &key.key("alerts"), &raw.alerts);
    let monitor = check_monitor(ck, &key.key("monitor"), &raw.monitor, interval_ms);
    let info = info_tags(ck, &mut tags, key, &raw.info);

    if ck.count() > errors_before {
        return None;
    }
    let system =
        match System::new(comps.resolved, &model.choices, raw.model.watson_n, reactions, model.bounds) {
            Ok(s) => s,
            Err(e) => {
                ck.err(&mk, e.to_string());
                return None;
            }
        };
    let notes = dynamics_notes(src, key, &raw.monitor, &name);
    Some(UnitConfig {
        notes,
        description: raw.description.clone().unwrap_or_default(),
        source: src.clone(),
        key: key.clone(),
        time_zone_name,
        input,
        spec: UnitSpec {
            name,
            time_zone,
            interval_ms,
            max_wait_ms,
            reorder_ms,
            system,
            tags: tags.tags,
            feeds,
            duty: duty?,
            heat_loss: heat_loss?,
            effluent_temperature: effluent_temperature?,
            effluent_composition,
            effluent_smoothing_ms,
            analyzer_sum_tolerance: model.analyzer_sum_tolerance,
            conversions,
            pressure: model.pressure,
            ambient,
            bubble_margin: model.bubble_margin,
            apparent_reaction: model.apparent_reaction,
            accepted_flags: model.accepted_flags,
            alerts,
            monitor,
            info,
        },
    })
}

/// A note when `dead_time` or `lag` is unset: they default to 0 (no dynamic compensation),
/// which makes every feed or duty move look like a residual transient.
fn dynamics_notes(src: &SourceText, key: &KeyPath, m: &RawMonitor, unit: &str) -> Vec<LocatedError> {
    let unset: Vec<&str> = [("dead_time", m.dead_time.is_none()), ("lag", m.lag.is_none())]
        .into_iter()
        .filter_map(|(name, unset)| unset.then_some(name))
        .collect();
    if unset.is_empty() {
        return Vec::new();
    }
    let path = src.path.display();
    vec![src.error_at(
        &key.key("monitor"),
        format!(
            "{} unset, so 0 s: the prediction is not compensated for the reactor's dynamics; estimate {} with `efftemp identify --config {path} --unit {unit}`",
            if unset.len() == 2 { "dead_time and lag are".to_string() } else { format!("{} is", unset[0]) },
            if unset.len() == 2 { "them" } else { "it" }
        ),
    )]
}

/// The unit's name: letters, digits, `-` and `_` (it names files and alert ids).
fn unit_name(ck: &mut Checker<'_>, key: &KeyPath, name: Option<&String>) -> String {
    match name {
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
    }
}

/// The unit's own time zone and its name (UTC when it does not resolve).
fn unit_time_zone(ck: &mut Checker<'_>, key: &KeyPath, name: &str) -> (TimeZone, String) {
    match parse_time_zone(name) {
        Ok(tz) => (tz, name.to_string()),
        Err(e) => {
            ck.err(key, e);
            (TimeZone::UTC, "UTC".into())
        }
    }
}

/// `[unit.input]`: where the export files are and how their rows read.
fn input(ck: &mut Checker<'_>, ik: &KeyPath, inp: &RawInput, base: &Path, unit_tz: &TimeZone) -> InputConfig {
    let directory = match &inp.directory {
        Some(d) => resolve_path(base, d),
        None => {
            ck.err(ik, "directory is required (the export directory)");
            PathBuf::new()
        }
    };
    let pattern = inp.pattern.clone().unwrap_or_else(|| "*.csv".to_string());
    if pattern.trim().is_empty() {
        ck.err(&ik.key("pattern"), "pattern is empty: give the export file names, e.g. \"plant_*.csv\"");
    }
    if pattern.contains('/') {
        ck.err(&ik.key("pattern"), "pattern matches file names only; put directories in `directory`");
    }
    let exclude = inp.exclude.clone().unwrap_or_default();
    for (i, x) in exclude.iter().enumerate() {
        let k = ik.key("exclude").index(i);
        if x.trim().is_empty() {
            ck.err(&k, "an empty pattern excludes nothing; remove it");
        } else if x.contains('/') {
            ck.err(&k, "exclude patterns match file names only, like `pattern`");
        } else if x.chars().all(|c| c == '*') || *x == pattern {
            ck.err(&k, format!("`{x}` excludes every file that `pattern = \"{pattern}\"` matches"));
        }
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
    let timestamp_format = timestamp_format(ck, &ik.key("timestamp_format"), inp.timestamp_format.as_deref());
    let input_tz = match &inp.time_zone {
        None => unit_tz.clone(),
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
    InputConfig {
        directory,
        pattern,
        exclude,
        layout,
        timestamp_column: inp.timestamp_column.clone().unwrap_or_else(|| "timestamp".into()),
        timestamp_format,
        time_zone: input_tz,
        reject_unknown_tags,
        links_outside: inp.links_outside.unwrap_or(false),
    }
}

/// `rfc3339` or a strftime format that can describe a date and time.
fn timestamp_format(ck: &mut Checker<'_>, key: &KeyPath, format: Option<&str>) -> TimestampFormat {
    match format.unwrap_or("rfc3339") {
        "rfc3339" => TimestampFormat::Rfc3339,
        f => {
            if !f.contains('%') {
                ck.err(
                    key,
                    format!("`{f}` is neither \"rfc3339\" nor a strftime format like \"%Y-%m-%d %H:%M:%S\""),
                );
            } else if let Err(e) = jiff::civil::DateTime::strptime(
                f,
                jiff::civil::date(2026, 1, 2).at(3, 4, 5, 0).strftime(f).to_string(),
            ) {
                ck.err(key, format!("format `{f}` cannot describe a date and time: {e}"));
            }
            TimestampFormat::Local(f.to_string())
        }
    }
}

/// `[unit.timing]`: the interval, the longest wait for late data, and an empty tag table with
/// the default staleness of its tags.
fn timing(ck: &mut Checker<'_>, tk: &KeyPath, t: &RawTiming) -> (i64, i64, i64, TagTable) {
    let interval_ms = ck.duration(&tk.key("interval"), t.interval.as_ref(), 60_000);
    if interval_ms < 1_000 || 86_400_000 % interval_ms != 0 {
        ck.err(
            &tk.key("interval"),
            "interval must be at least 1 s and divide a day evenly (e.g. 10s, 1m, 5m, 1h)",
        );
    }
    let max_wait_ms = ck.duration(&tk.key("max_wait"), t.max_wait.as_ref(), 5 * interval_ms.max(60_000));
    let reorder_ms =
        reorder_window(ck, &tk.key("reorder_window"), t.reorder_window.as_ref(), interval_ms, max_wait_ms);
    let tags = TagTable {
        tags: Vec::new(),
        default_stale_ms: ck.duration(
            &tk.key("stale_after"),
            t.stale_after.as_ref(),
            5 * interval_ms.max(60_000),
        ),
        analyzer_stale_ms: ck.duration(
            &tk.key("analyzer_stale_after"),
            t.analyzer_stale_after.as_ref(),
            45 * 60_000,
        ),
    };
    (interval_ms, max_wait_ms, reorder_ms, tags)
}

/// Default reorder window: one interval, at most 2 minutes (and never beyond `max_wait`).
const REORDER_DEFAULT_MAX_MS: i64 = 2 * 60_000;

/// `[unit.timing] reorder_window`: a duration (or "0s") not longer than `max_wait`.
fn reorder_window(
    ck: &mut Checker<'_>,
    key: &KeyPath,
    v: Option<&String>,
    interval_ms: i64,
    max_wait_ms: i64,
) -> i64 {
    let Some(text) = v else {
        return interval_ms.min(REORDER_DEFAULT_MAX_MS).min(max_wait_ms).max(0);
    };
    let zero = text.trim().trim_end_matches(|c: char| c.is_ascii_alphabetic()).trim();
    let ms = if zero.chars().all(|c| c == '0') && !zero.is_empty() {
        0
    } else {
        match parse_duration_ms(text) {
            Ok(ms) => ms,
            Err(e) => {
                ck.err(key, e);
                return 0;
            }
        }
    };
    if ms > max_wait_ms {
        ck.err(
            key,
            format!(
                "reorder_window `{text}` is longer than max_wait ({} s): intervals would close after max_wait anyway; make max_wait at least as long",
                max_wait_ms / 1000
            ),
        );
    }
    ms.min(max_wait_ms)
}

/// The components of a unit, in order of first use.
struct Components {
    /// Ids as first written, with the key of that first use.
    ids: Vec<(String, KeyPath)>,
    /// The resolved components (all of them only when no id had an error).
    resolved: Vec<Component>,
}

impl Components {
    fn index_of(&self, id: &str) -> Option<usize> {
        self.ids.iter().position(|(x, _)| normalize_id(x) == normalize_id(id))
    }

    fn len(&self) -> usize {
        self.ids.len()
    }
}

/// The unit's components (feeds, then reactions, then the effluent analyzer), resolved in the
/// site's library with the unit's inline components added.
fn components(
    ck: &mut Checker<'_>,
    raw: &RawUnit,
    src: &Arc<SourceText>,
    key: &KeyPath,
    site_library: &Library,
) -> Components {
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
    let mut resolved = Vec::new();
    for (id, k) in &ids {
        if !library.contains(id) {
            ck.push(library.unknown(id, src, k));
        } else {
            match library.resolve(id) {
                Ok(c) => resolved.push(c),
                Err(e) => ck.extend(e.0),
            }
        }
    }
    Components { ids, resolved }
}

/// `[[unit.feed]]`: at least one.
fn feeds(
    ck: &mut Checker<'_>,
    tags: &mut TagTable,
    key: &KeyPath,
    raw: &[RawFeed],
    comps: &Components,
) -> Vec<FeedConfig> {
    if raw.is_empty() {
        ck.err(key, "at least one [[unit.feed]] is required");
    }
    let mut feeds = Vec::new();
    for (j, f) in raw.iter().enumerate() {
        if let Some(feed) = feed(ck, tags, &key.key("feed").index(j), j, f, comps) {
            feeds.push(feed);
        }
    }
    feeds
}

/// One feed: flow, temperature, composition and basis.
fn feed(
    ck: &mut Checker<'_>,
    tags: &mut TagTable,
    fk: &KeyPath,
    j: usize,
    f: &RawFeed,
    comps: &Components,
) -> Option<FeedConfig> {
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
            ck.err(fk, "flow is required");
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
            ck.err(fk, "temperature is required");
            None
        }
    };
    let basis = ck.basis(&fk.key("basis"), f.basis.as_ref());
    let composition = feed_composition(ck, tags, fk, (&fname, basis), f, comps);
    let (Some((flow, fq)), Some((temperature, _))) = (flow, temperature) else { return None };
    fixed_positive(ck, &fk.key("flow"), flow);
    fixed_positive(ck, &fk.key("temperature"), temperature);
    let composition_uncertainty = f.composition_uncertainty.map_or(DESIGN_COMPOSITION_U, |u| {
        ck.within(&fk.key("composition_uncertainty"), u, Range::UnitClosedBelow)
            .unwrap_or(DESIGN_COMPOSITION_U)
    });
    Some(FeedConfig {
        name: fname,
        flow,
        mass_flow: fq == Quantity::MassFlow,
        temperature,
        composition,
        basis,
        normalize: f.normalize.unwrap_or(true),
        composition_uncertainty,
    })
}

/// How well a typed-in feed composition is known when it says nothing (absolute fraction).
/// An assumption, common practice for design compositions of feeds from upstream units or
/// tanks: they wander by one to a few mol% between laboratory checks; 0.02 covers most of it.
const DESIGN_COMPOSITION_U: f64 = 0.02;

/// A feed's fractions per unit component: analyzer tags, or fixed fractions that sum to 1
/// (unless `normalize = true`).
fn feed_composition(
    ck: &mut Checker<'_>,
    tags: &mut TagTable,
    fk: &KeyPath,
    (fname, basis): (&str, Basis),
    f: &RawFeed,
    comps: &Components,
) -> Vec<Signal> {
    if f.composition.is_empty() {
        ck.err(fk, "composition is required (analyzer tags or fixed fractions)");
    }
    let mut composition = vec![Signal::Fixed { si: 0.0, u: 0.0 }; comps.len()];
    let mut fixed_sum = 0.0;
    let mut all_fixed = true;
    for (id, s) in &f.composition {
        let role = format!("{fname} {id} fraction");
        let k = fk.key("composition").key(id);
        let Some((sig, _)) =
            tags.signal(ck, &k, s, &[Quantity::Dimensionless], &role, TagKind::Analyzer, false)
        else {
            continue;
        };
        tags.check_basis(ck, &k, s, sig, (fname, basis));
        match sig {
            Signal::Fixed { si, .. } => {
                ck.fraction(&k, "fraction", si);
                fixed_sum += si;
            }
            Signal::Tag(_) => all_fixed = false,
        }
        if let Some(i) = comps.index_of(id) {
            composition[i] = sig;
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
    composition
}

/// `[unit.heater]`: the reported duty (required) and the heat loss (default 0).
fn heater(
    ck: &mut Checker<'_>,
    tags: &mut TagTable,
    hk: &KeyPath,
    h: &RawHeater,
) -> (Option<Signal>, Option<Signal>) {
    let duty = match &h.duty {
        Some(s) => tags
            .signal(ck, &hk.key("duty"), s, &[Quantity::Power], "heater duty", TagKind::Continuous, true)
            .map(|x| x.0),
        None => {
            ck.err(hk, "duty is required (the reported heater duty)");
            None
        }
    };
    let heat_loss = match &h.heat_loss {
        Some(s) => tags
            .signal(ck, &hk.key("heat_loss"), s, &[Quantity::Power], "heat loss", TagKind::Continuous, false)
            .map(|x| x.0),
        None => Some(Signal::Fixed { si: 0.0, u: 0.0 }),
    };
    (duty, heat_loss)
}

/// `[unit.effluent] temperature`: the measured tag the prediction is compared with.
fn effluent_temperature(
    ck: &mut Checker<'_>,
    tags: &mut TagTable,
    ek: &KeyPath,
    e: &RawEffluent,
) -> Option<usize> {
    let Some(s) = &e.temperature else {
        ck.err(ek, "temperature is required (the measured effluent temperature tag)");
        return None;
    };
    let k = ek.key("temperature");
    let role = "effluent temperature";
    match tags.signal(ck, &k, s, &[Quantity::Temperature], role, TagKind::Continuous, true) {
        Some((Signal::Tag(i), _)) => Some(i),
        Some(_) => {
            ck.err(&k, "the effluent temperature must be a tag (it is what the prediction is compared with)");
            None
        }
        None => None,
    }
}

/// `[unit.effluent] composition`: an optional effluent analyzer, with its basis.
fn effluent_composition(
    ck: &mut Checker<'_>,
    tags: &mut TagTable,
    ek: &KeyPath,
    e: &RawEffluent,
    comps: &Components,
) -> Option<(Vec<Signal>, Basis)> {
    let c = e.composition.as_ref()?;
    let basis = ck.basis(&ek.key("basis"), e.basis.as_ref());
    let mut sigs = vec![Signal::Fixed { si: 0.0, u: 0.0 }; comps.len()];
    for (id, s) in c {
        let role = format!("effluent {id} fraction");
        let k = ek.key("composition").key(id);
        let Some((sig, _)) =
            tags.signal(ck, &k, s, &[Quantity::Dimensionless], &role, TagKind::Analyzer, false)
        else {
            continue;
        };
        tags.check_basis(ck, &k, s, sig, ("effluent analyzer", basis));
        if let Some(i) = comps.index_of(id) {
            sigs[i] = sig;
        }
    }
    Some((sigs, basis))
}

/// `[[unit.reaction]]`: the reactions of the balance and their conversions.
fn reactions(
    ck: &mut Checker<'_>,
    tags: &mut TagTable,
    key: &KeyPath,
    raw: &[RawUnitReaction],
    comps: &Components,
) -> (Vec<Reaction>, Vec<ConversionConfig>) {
    let mut reactions = Vec::new();
    let mut conversions = Vec::new();
    for (r, re) in raw.iter().enumerate() {
        let rk = key.key("reaction").index(r);
        let mut nu = vec![0.0; comps.len()];
        for (id, c) in &re.stoichiometry {
            if let Some(i) = comps.index_of(id) {
                nu[i] += c;
            }
        }
        let key_idx = match &re.key {
            Some(k) if re.stoichiometry.keys().any(|s| normalize_id(s) == normalize_id(k)) => {
                comps.index_of(k)
            }
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
        ck.fraction(&rk.key("design_conversion"), "conversion", design);
        let u = re.conversion_uncertainty.map_or(0.0, |u| {
            ck.within(&rk.key("conversion_uncertainty"), u, Range::UnitClosedBelow).unwrap_or(0.0)
        });
        let tag = re.conversion.as_ref().and_then(|s| {
            let role = format!("reaction {} conversion", r + 1);
            let k = rk.key("conversion");
            let sig = tags.signal(ck, &k, s, &[Quantity::Dimensionless], &role, TagKind::Analyzer, false)?.0;
            tags.refuse_basis(ck, &k, s, sig, "a conversion is a fraction or %");
            Some(sig)
        });
        if let Some(k) = key_idx {
            let label = re.name.clone().unwrap_or_else(|| format!("reaction {}", r + 1));
            reactions.push(Reaction { label, nu, key: k });
            conversions.push(ConversionConfig { design, u, tag });
        }
    }
    (reactions, conversions)
}

/// `[unit.model]`, checked.
struct ModelSettings {
    choices: Vec<PathChoice>,
    pressure: Option<Signal>,
    bubble_margin: f64,
    bounds: (f64, f64),
    apparent_reaction: Option<usize>,
    accepted_flags: Vec<String>,
    analyzer_sum_tolerance: f64,
}

/// `[unit.model]`; `reactions` is (checked, written).
fn model(
    ck: &mut Checker<'_>,
    tags: &mut TagTable,
    mk: &KeyPath,
    m: &RawUnitModel,
    comps: &Components,
    reactions: (usize, usize),
) -> ModelSettings {
    let choices = enthalpy_choices(ck, mk, m, comps);
    let pressure = m.pressure.as_ref().and_then(|s| {
        let role = "reactor pressure";
        let sig = tags
            .signal(ck, &mk.key("pressure"), s, &[Quantity::Pressure], role, TagKind::Continuous, false)?
            .0;
        fixed_positive(ck, &mk.key("pressure"), sig);
        Some(sig)
    });
    let bubble_margin = m
        .bubble_margin
        .as_ref()
        .and_then(|b| ck.number(&mk.key("bubble_margin"), b, Quantity::TemperatureDifference))
        .and_then(|b| ck.within(&mk.key("bubble_margin"), b, Range::NonNegative))
        .unwrap_or(crate::config::case::DEFAULT_BUBBLE_MARGIN);
    if let Some(n) = m.watson_n {
        ck.within(&mk.key("watson_n"), n, Range::Positive);
    }
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
        None if reactions.0 > 0 => Some(0),
        None => None,
        Some(r) if r >= 1 && r <= reactions.1 => Some(r - 1),
        Some(r) => {
            ck.err(&mk.key("apparent_conversion_reaction"), format!("there is no reaction {r} (1-based)"));
            None
        }
    };
    let accepted_flags = accepted_flags(ck, mk, m, comps);
    let analyzer_sum_tolerance =
        m.analyzer_sum_tolerance.unwrap_or(crate::core::model::ANALYZER_SUM_TOLERANCE);
    if !(0.0..0.5).contains(&analyzer_sum_tolerance) {
        ck.err(
            &mk.key("analyzer_sum_tolerance"),
            format!(
                "must be a fraction in 0..0.5 (0.02 accepts sums of 98-102 %), got {analyzer_sum_tolerance}"
            ),
        );
    }
    ModelSettings {
        choices,
        pressure,
        bubble_margin,
        bounds,
        apparent_reaction,
        accepted_flags,
        analyzer_sum_tolerance,
    }
}

/// The enthalpy path of each component: the unit's default, or the component's own.
fn enthalpy_choices(
    ck: &mut Checker<'_>,
    mk: &KeyPath,
    m: &RawUnitModel,
    comps: &Components,
) -> Vec<PathChoice> {
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
    let mut choices = vec![global; comps.len()];
    for (id, s) in &m.component_enthalpy {
        let k = mk.key("component_enthalpy").key(id);
        match (comps.index_of(id), PathChoice::parse(s)) {
            (Some(i), Some(c)) => choices[i] = c,
            (None, _) => ck.err(&k, format!("component `{id}` is not used by this unit")),
            (_, None) => ck.err(&k, format!("unknown enthalpy path `{s}`")),
        }
    }
    choices
}

/// The correlation-range flags an engineer has accepted. Only extrapolations of a correlation
/// can be accepted: a liquid beyond its critical temperature or a two-phase risk is never a
/// reviewed, steady condition.
fn accepted_flags(ck: &mut Checker<'_>, mk: &KeyPath, m: &RawUnitModel, comps: &Components) -> Vec<String> {
    let mut accepted = Vec::new();
    for (i, f) in m.accepted_flags.iter().enumerate() {
        let k = mk.key("accepted_flags").index(i);
        match f.split_once(':') {
            Some((kind @ ("range_cp_liq" | "range_cp_ig" | "range_psat"), id))
                if let Some(i) = comps.index_of(id) =>
            {
                // The flag's code names the component as the unit first wrote it.
                accepted.push(format!("{kind}:{}", comps.ids[i].0));
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
    accepted
}

/// `[unit.alerts]`.
fn alerts(ck: &mut Checker<'_>, ak: &KeyPath, a: &RawAlerts) -> AlertConfig {
    let mut count = |name: &str, v: Option<u32>, min: u32, default: u32| {
        v.map_or(default, |n| ck.at_least(&ak.key(name), n, min).unwrap_or(default))
    };
    let (on_delay, off_delay) = (count("on_delay", a.on_delay, 1, 2), count("off_delay", a.off_delay, 1, 3));
    let flood_count = count("flood_count", a.flood_count, 2, 10);
    AlertConfig {
        on_delay,
        off_delay,
        realert_suppress_ms: ck.duration(
            &ak.key("realert_suppress"),
            a.realert_suppress.as_ref(),
            12 * 3_600_000,
        ),
        flood_count,
        flood_window_ms: ck.duration(&ak.key("flood_window"), a.flood_window.as_ref(), 600_000),
        reminder_ms: ck.duration(&ak.key("reminder"), a.reminder.as_ref(), 24 * 3_600_000),
        shelve_max_ms: ck.duration(&ak.key("shelve_max"), a.shelve_max.as_ref(), 7 * 86_400_000),
    }
}

/// `[unit.monitor]`.
fn check_monitor(ck: &mut Checker<'_>, key: &KeyPath, m: &RawMonitor, interval_ms: i64) -> MonitorConfig {
    let mut c = MonitorConfig::default();
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
    // Zero (the default) switches the dynamic compensation off.
    c.dead_time_ms = ck.duration_or_zero(&key.key("dead_time"), m.dead_time.as_ref(), 0);
    c.lag_ms = ck.duration_or_zero(&key.key("lag"), m.lag.as_ref(), 0);
    let settings = [
        ("false_alert_days", m.false_alert_days, &mut c.false_alert_days, Range::Positive),
        ("cusum_k", m.cusum_k, &mut c.cusum_k, Range::Positive),
        ("ewma_lambda", m.ewma_lambda, &mut c.ewma_lambda, Range::UnitClosedAbove),
        ("shewhart_z", m.shewhart_z, &mut c.shewhart_z, Range::Positive),
        ("enter_z", m.enter_z, &mut c.enter_z, Range::Positive),
        ("clear_z", m.clear_z, &mut c.clear_z, Range::Positive),
        ("effectiveness_limit", m.effectiveness_limit, &mut c.effectiveness_limit, Range::OpenUnit),
        ("min_feed_fraction", m.min_feed_fraction, &mut c.min_feed_fraction, Range::OpenUnit),
        ("min_fouling_loss", m.min_fouling_loss, &mut c.min_fouling_loss, Range::UnitClosedBelow),
        (
            "min_conversion_change",
            m.min_conversion_change,
            &mut c.min_conversion_change,
            Range::UnitClosedBelow,
        ),
    ];
    for (name, v, target, range) in settings {
        if let Some(x) = v
            && let Some(x) = ck.within(&key.key(name), x, range)
        {
            *target = x;
        }
    }
    if c.clear_z >= c.enter_z {
        ck.err(
            &key.key("clear_z"),
            format!("clear_z ({}) must be below enter_z ({}) to give a deadband", c.clear_z, c.enter_z),
        );
    }
    if let Some(n) = m.clear_blocks
        && let Some(n) = ck.at_least(&key.key("clear_blocks"), n, 1)
    {
        c.clear_blocks = n;
    }
    c.trend_window_ms = ck.duration(&key.key("trend_window"), m.trend_window.as_ref(), c.trend_window_ms);
    c.trend_point_ms = ck.duration(&key.key("trend_point"), m.trend_point.as_ref(), c.trend_point_ms);
    c.ambient_window_ms =
        ck.duration(&key.key("ambient_window"), m.ambient_window.as_ref(), c.ambient_window_ms);
    c.separation_window_ms =
        ck.duration(&key.key("separation_window"), m.separation_window.as_ref(), c.separation_window_ms);
    if let Some(u) = &m.max_prediction_uncertainty {
        let k = key.key("max_prediction_uncertainty");
        if let Some(v) = ck.number(&k, u, Quantity::TemperatureDifference)
            && let Some(v) = ck.within(&k, v, Range::Positive)
        {
            c.max_prediction_uncertainty = v;
        }
    }
    steady_state(ck, &key.key("steady_state"), &m.steady_state, &mut c);
    c
}

/// `[unit.monitor.steady_state]`.
fn steady_state(ck: &mut Checker<'_>, sk: &KeyPath, s: &RawSsd, c: &mut MonitorConfig) {
    if let Some([l1, l2, l3]) = s.lambdas {
        if [l1, l2, l3].iter().all(|l| *l > 0.0 && *l <= 1.0) {
            c.ssd.lambda1 = l1;
            c.ssd.lambda2 = l2;
            c.ssd.lambda3 = l3;
        } else {
            ck.err(&sk.key("lambdas"), "filter constants must be within (0, 1]");
        }
    }
    if let Some(v) = s.r_high
        && let Some(v) = ck.within(&sk.key("r_high"), v, Range::Positive)
    {
        c.ssd.r_hi = v;
    }
    if let Some(v) = s.r_low
        && let Some(v) = ck.within(&sk.key("r_low"), v, Range::Positive)
    {
        c.ssd.r_lo = v;
    }
    if c.ssd.r_lo >= c.ssd.r_hi {
        ck.err(sk, "r_low must be below r_high (hysteresis)");
    }
    if let Some(n) = s.steady_count
        && let Some(n) = ck.at_least(&sk.key("steady_count"), n, 1)
    {
        c.ssd.steady_count = n;
    }
}

/// The quantities an informational tag may measure (its unit must be one of theirs).
const INFO_QUANTITIES: &[Quantity] = &[
    Quantity::Temperature,
    Quantity::Pressure,
    Quantity::MolarFlow,
    Quantity::MassFlow,
    Quantity::Power,
    Quantity::Dimensionless,
];

/// `[unit.info]`: informational tags, each a soft-tag column named by its key. They are read,
/// checked (unit, range, staleness) and written like any tag, but no computation uses them.
fn info_tags(
    ck: &mut Checker<'_>,
    tags: &mut TagTable,
    key: &KeyPath,
    raw: &IndexMap<String, RawSignal>,
) -> Vec<(String, usize)> {
    let standard: Vec<&str> = crate::sinks::softtags::SOFT_TAG_HEADER.split(',').collect();
    let mut out = Vec::new();
    for (name, s) in raw {
        let k = key.key("info").key(name);
        if name.is_empty() || !name.chars().all(|c| c.is_ascii_alphanumeric() || matches!(c, '_' | '-' | '.'))
        {
            ck.err(&k, format!("column name `{name}` may contain only letters, digits, '_', '-' and '.'"));
        } else if standard.contains(&name.as_str()) {
            ck.err(
                &k,
                format!("`{name}` is already a soft-tag column; name the informational column otherwise"),
            );
        }
        let RawSignal::Table(t) = s else {
            ck.err(&k, "an informational tag is a table: { tag = \"PI-2045\", unit = \"barg\" }");
            continue;
        };
        if t.tag.is_none() || t.value.is_some() {
            ck.err(&k, "an informational tag needs `tag` (a fixed value would tell nothing)");
            continue;
        }
        if t.unit.is_none() {
            ck.err(&k, "an informational tag needs a `unit` (\"fraction\" for a plain number)");
            continue;
        }
        if t.uncertainty.is_some() {
            ck.err(
                &k.key("uncertainty"),
                "an informational tag enters no computation: `uncertainty` has no use",
            );
        }
        let before = tags.tags.len();
        let role = format!("{name} (informational)");
        if let Some((Signal::Tag(i), _)) =
            tags.signal(ck, &k, s, INFO_QUANTITIES, &role, TagKind::Continuous, false)
        {
            // A tag the balance also reads stays a balance tag.
            if i >= before {
                tags.tags[i].info = true;
            }
            out.push((name.clone(), i));
        }
    }
    out
}

/// The composition basis a fraction unit names: `mol%` mole, `mass%` mass.
fn basis_of_unit(symbol: &str) -> Option<Basis> {
    match symbol {
        "mol%" => Some(Basis::Mole),
        "mass%" => Some(Basis::Mass),
        _ => None,
    }
}

/// The unit symbol a signal is written in: its tag's unit, or the unit of a fixed value's text.
fn written_symbol<'t>(tags: &'t TagTable, raw: &'t RawSignal, sig: Signal) -> Option<&'t str> {
    match (sig, raw) {
        (Signal::Tag(i), _) => Some(tags.tags[i].unit.symbol),
        (Signal::Fixed { .. }, RawSignal::Fixed(Number::Text(t)))
        | (Signal::Fixed { .. }, RawSignal::Table(RawSignalTable { value: Some(Number::Text(t)), .. })) => {
            let unit = units::unit_part(t)?;
            units::lookup(Quantity::Dimensionless, unit).map(|u| u.symbol)
        }
        _ => None,
    }
}

/// Builds the tag table of a unit while signals are checked.
struct TagTable {
    tags: Vec<TagConfig>,
    default_stale_ms: i64,
    analyzer_stale_ms: i64,
}

impl TagTable {
    /// A fraction written in `mol%` or `mass%` must agree with its stream's basis.
    fn check_basis(
        &self,
        ck: &mut Checker<'_>,
        key: &KeyPath,
        raw: &RawSignal,
        sig: Signal,
        (stream, basis): (&str, Basis),
    ) {
        let Some(symbol) = written_symbol(self, raw, sig) else { return };
        if let Some(b) = basis_of_unit(symbol)
            && b != basis
        {
            let (want, have) = (basis_word(b), basis_word(basis));
            ck.err(
                key,
                format!(
                    "given in {symbol}, but the basis of {stream} is \"{have}\": set basis = \"{want}\" there, or give {have} fractions"
                ),
            );
        }
    }

    /// A signal that is not a composition may not be written in `mol%` or `mass%`.
    fn refuse_basis(&self, ck: &mut Checker<'_>, key: &KeyPath, raw: &RawSignal, sig: Signal, what: &str) {
        if let Some(symbol) = written_symbol(self, raw, sig)
            && basis_of_unit(symbol).is_some()
        {
            ck.err(key, format!("{symbol} is a composition unit; {what}"));
        }
    }

    /// Check a signal of a quantity (or of `quantities`, first match wins).
    #[allow(clippy::too_many_arguments)]
    fn signal(
        &mut self,
        ck: &mut Checker<'_>,
        key: &KeyPath,
        raw: &RawSignal,
        quantities: &[Quantity],
        role: &str,
        default_kind: TagKind,
        required: bool,
    ) -> Option<(Signal, Quantity)> {
        let t = match raw {
            RawSignal::Fixed(n) => {
                return ck.number_any(key, n, quantities).map(|(v, q)| (Signal::Fixed { si: v, u: 0.0 }, q));
            }
            RawSignal::Table(t) => t,
        };
        match (&t.tag, &t.value) {
            (Some(_), Some(_)) => {
                ck.err(key, "give either `tag` or `value`, not both");
                None
            }
            (None, None) => {
                ck.err(key, "a signal needs `tag` (with `unit`) or `value`");
                None
            }
            (None, Some(v)) => {
                let (si, q) = ck.number_any(&key.key("value"), v, quantities)?;
                let u = signal_uncertainty(ck, &key.key("uncertainty"), t.uncertainty.as_ref(), q).at(si);
                Some((Signal::Fixed { si, u }, q))
            }
            (Some(tag), None) => self.tag(ck, key, tag.trim(), t, quantities, role, default_kind, required),
        }
    }

    /// A signal read from tag `tag` (trimmed), added to the table unless already in it.
    #[allow(clippy::too_many_arguments)]
    fn tag(
        &mut self,
        ck: &mut Checker<'_>,
        key: &KeyPath,
        tag: &str,
        t: &RawSignalTable,
        quantities: &[Quantity],
        role: &str,
        default_kind: TagKind,
        required: bool,
    ) -> Option<(Signal, Quantity)> {
        if tag.is_empty() {
            ck.err(&key.key("tag"), "tag name is empty");
            return None;
        }
        if tag.chars().any(char::is_control) {
            // A line break in a tag would split every soft-tag row in two for line-based shippers.
            ck.err(
                &key.key("tag"),
                format!("tag name {tag:?} contains a control character (a line break or tab?)"),
            );
            return None;
        }
        let unit = tag_unit(ck, key, tag, t, quantities, role)?;
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
        let stale_after_ms = ck.duration(&key.key("stale_after"), t.stale_after.as_ref(), default_stale);
        let range = t.range.and_then(|[lo, hi]| ck.range(&key.key("range"), lo, hi));
        let unc = signal_uncertainty(ck, &key.key("uncertainty"), t.uncertainty.as_ref(), unit.quantity);
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
            name: tag.to_string(),
            unit,
            kind,
            stale_after_ms,
            range,
            uncertainty: unc,
            required: required && kind == TagKind::Continuous,
            role: role.to_string(),
            info: false,
        });
        Some((Signal::Tag(self.tags.len() - 1), unit.quantity))
    }
}

/// The engineering unit of a tag: one of `quantities`' units (a fraction when no unit is
/// given and a fraction is accepted); a gauge pressure is read at the site's atmospheric
/// pressure.
fn tag_unit(
    ck: &mut Checker<'_>,
    key: &KeyPath,
    tag: &str,
    t: &RawSignalTable,
    quantities: &[Quantity],
    role: &str,
) -> Option<Unit> {
    let unit_text = t.unit.clone().unwrap_or_default();
    let text = unit_text.trim();
    let pressure = quantities.contains(&Quantity::Pressure);
    let found = if text.is_empty() && quantities.contains(&Quantity::Dimensionless) {
        Some(units::FRACTION)
    } else if pressure && units::is_gauge(text) {
        let Some(atm) = ck.atmosphere() else {
            ck.err(&key.key("unit"), format!("`{text}` is a gauge pressure; give the absolute pressure"));
            return None;
        };
        units::gauge(text, atm)
    } else {
        quantities.iter().find_map(|q| units::lookup(*q, text)).copied()
    };
    if found.is_none() {
        let mut accepted: Vec<&str> = quantities.iter().flat_map(|q| units::accepted(*q)).collect();
        if pressure && ck.atmosphere().is_some() {
            accepted.extend(units::gauge_symbols());
        }
        if t.unit.is_none() {
            ck.err(key, format!("tag `{tag}` needs a `unit` ({})", accepted.join(", ")));
        } else {
            ck.err(
                &key.key("unit"),
                format!("unknown unit `{unit_text}` for {role}; accepted: {}", accepted.join(", ")),
            );
        }
    }
    found
}

/// A fixed value of a quantity that cannot be zero or negative in SI (a flow, an absolute
/// temperature or pressure) must be positive.
fn fixed_positive(ck: &mut Checker<'_>, key: &KeyPath, sig: Signal) {
    if let Signal::Fixed { si, .. } = sig {
        ck.within(key, si, Range::Positive);
    }
}

/// The word of a basis, as written in the file.
fn basis_word(b: Basis) -> &'static str {
    match b {
        Basis::Mole => "mole",
        Basis::Mass => "mass",
    }
}

/// The uncertainty of a signal (`"x %"` of a fraction is an amount of it); none when absent or
/// when it does not check.
fn signal_uncertainty(ck: &mut Checker<'_>, key: &KeyPath, raw: Option<&Number>, q: Quantity) -> Uncertainty {
    raw.and_then(|n| ck.uncertainty(key, n, q, Percent::Absolute)).unwrap_or(Uncertainty::None)
}
