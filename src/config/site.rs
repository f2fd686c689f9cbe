//! Site configuration (`efftemp run/check/replay --config FILE`).
//!
//! Two stages, as for the `calc` case file: [`RawSite`] mirrors the TOML exactly
//! (`deny_unknown_fields`), then [`SiteConfig::load`] resolves includes, units, time zones,
//! durations, tag mappings and the thermodynamic system of every reactor unit, and reports
//! **every** problem with file, line and key. `efftemp check` prints them and exits 2.
//!
//! This file checks the site-wide sections (`[site]`, `[service]`, `[forward.syslog]`) and
//! the includes; each `[[unit]]` is checked in [`super::unit`].

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use jiff::tz::TimeZone;

use super::check::{Checker, parse_time_zone, resolve_path};
use super::raw::{RawFacility, RawInclude, RawService, RawSite, RawSiteSection, RawSyslog, RawUnit};
use super::unit::{UnitConfig, check_unit};
use crate::ingest::settings::WatchMode;
use crate::sinks::syslog::SyslogConfig;
use crate::source::{KeyPath, LocatedError, LocatedErrors, SourceText};
use crate::thermo::component::{Library, Origin};

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
    /// How long one pass may read while catching up on a backlog, ms.
    pub slice_ms: u64,
    /// Health and metrics endpoint, if enabled.
    pub http_address: Option<std::net::SocketAddr>,
    /// How long outputs are kept.
    pub retention: crate::sinks::retention::Retention,
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
    pub syslog: Option<SyslogConfig>,
    /// Atmospheric pressure, Pa, at which gauge-pressure tags are read.
    pub atmospheric_pressure_pa: f64,
    /// Site-wide notes for `check` and the service log (located, not errors).
    pub notes: Vec<LocatedError>,
}

/// The standard atmosphere, Pa (the default `atmospheric_pressure`).
const STANDARD_ATMOSPHERE_PA: f64 = 101_325.0;

/// The plausible range of a site's atmospheric pressure, Pa: from about 5500 m above sea level
/// to a deep valley in high weather.
const ATMOSPHERE_RANGE_PA: (f64, f64) = (50_000.0, 110_000.0);

/// A unit as read from the main file or an include: the file and the unit's key in it.
type FoundUnit = (RawUnit, Arc<SourceText>, KeyPath);

/// Whether one of two directories contains the other (or they are the same), comparing
/// resolved paths where they exist and the paths as written otherwise.
fn same_tree(a: &Path, b: &Path) -> bool {
    let a = std::fs::canonicalize(a).unwrap_or_else(|_| a.to_path_buf());
    let b = std::fs::canonicalize(b).unwrap_or_else(|_| b.to_path_buf());
    a.starts_with(&b) || b.starts_with(&a)
}

impl SiteConfig {
    /// Load and check a site configuration with its includes. Every problem is reported.
    pub fn load(path: &Path) -> Result<SiteConfig, LocatedErrors> {
        let main = Arc::new(SourceText::read(path)?);
        let raw: RawSite = main.deserialize_all().map_err(LocatedErrors)?;
        let mut errors = Vec::new();
        let base = main.path.parent().map(Path::to_path_buf).unwrap_or_default();
        let (files, units) = read_includes(&main, &raw, path, &mut errors);

        let mut ck = Checker::new(&main, &mut errors);
        let site_tz_name = raw.site.time_zone.clone().unwrap_or_else(|| "UTC".to_string());
        let site_tz = parse_time_zone(&site_tz_name).unwrap_or_else(|e| {
            ck.err(&KeyPath::keys("site.time_zone"), e);
            TimeZone::UTC
        });
        let state_dir = resolve_path(&base, raw.site.state_dir.as_deref().unwrap_or("state"));
        let output_dir = resolve_path(&base, raw.site.output_dir.as_deref().unwrap_or("output"));
        if let Some(problem) = state_dir_problem(&state_dir) {
            ck.err(&KeyPath::keys("site.state_dir"), problem);
        }
        for (key, dir) in [("site.state_dir", &state_dir), ("site.output_dir", &output_dir)] {
            if let Some(problem) = system_dir_problem(dir) {
                ck.err(&KeyPath::keys(key), problem);
            }
        }
        let service = check_service(&mut ck, &raw.service);
        let syslog = raw.forward.syslog.as_ref().and_then(|s| check_syslog(&mut ck, s, &state_dir));
        let library = site_library(&mut ck, &raw.site, &main, &base)?;
        let atmosphere = atmospheric_pressure(&mut ck, raw.site.atmospheric_pressure.as_ref());
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
        let notes = service
            .http_address
            .filter(|a| !a.ip().is_loopback())
            .map(|a| {
                main.error_at(
                    &KeyPath::keys("service.http_address"),
                    format!(
                        "{a} is reachable beyond this machine: anyone who can reach it reads the metrics; keep loopback and put a reverse proxy with its own authentication in front (docs/operation.md)"
                    ),
                )
            })
            .into_iter()
            .collect();
        let site = SiteUnits {
            library: &library,
            tz: &site_tz,
            tz_name: &site_tz_name,
            dirs: [&output_dir, &state_dir],
            atmosphere,
        };
        let checked = site.check(&units, &mut errors);
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
            atmospheric_pressure_pa: atmosphere,
            notes,
        })
    }
}

/// The main file's units and those of its includes (depth first, with cycle detection), and
/// every file read.
fn read_includes(
    main: &Arc<SourceText>,
    raw: &RawSite,
    path: &Path,
    errors: &mut Vec<LocatedError>,
) -> (Vec<Arc<SourceText>>, Vec<FoundUnit>) {
    let mut files = vec![main.clone()];
    let mut units: Vec<FoundUnit> = raw
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
    (files, units)
}

/// `[site] atmospheric_pressure`: an absolute pressure within [`ATMOSPHERE_RANGE_PA`].
fn atmospheric_pressure(ck: &mut Checker<'_>, raw: Option<&crate::units::Number>) -> f64 {
    let Some(v) = raw else { return STANDARD_ATMOSPHERE_PA };
    let key = KeyPath::keys("site.atmospheric_pressure");
    let Some(p) = ck.number(&key, v, crate::units::Quantity::Pressure) else { return STANDARD_ATMOSPHERE_PA };
    let (lo, hi) = ATMOSPHERE_RANGE_PA;
    if (lo..=hi).contains(&p) {
        p
    } else {
        ck.err(
            &key,
            format!(
                "an atmospheric pressure must be within {} to {} kPa (absolute), got {} Pa (`{}`)",
                lo / 1e3,
                hi / 1e3,
                p,
                v.as_written()
            ),
        );
        STANDARD_ATMOSPHERE_PA
    }
}

/// `[service]`, checked.
fn check_service(ck: &mut Checker<'_>, s: &RawService) -> ServiceConfig {
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
    let slice_key = KeyPath::keys("service.catch_up_slice");
    let slice_ms = ck.duration(&slice_key, s.catch_up_slice.as_ref(), 200);
    if !(10..=5_000).contains(&slice_ms) {
        ck.err(
            &slice_key,
            "must be between 10ms and 5s (the service answers shutdown and the watchdog between passes)",
        );
    }
    let max_record_bytes = s.max_record_bytes.unwrap_or(65_536);
    if !(256..=64 * 1024 * 1024).contains(&max_record_bytes) {
        ck.err(&KeyPath::keys("service.max_record_bytes"), "must be between 256 bytes and 64 MiB");
    }
    ServiceConfig {
        reconcile_ms: u64::try_from(reconcile_ms).unwrap_or(2_000),
        watch,
        max_record_bytes: usize::try_from(max_record_bytes).unwrap_or(65_536),
        seal_after_ms: u64::try_from(seal_after_ms).unwrap_or(600_000),
        alerts_to_stdout: s.alerts_to_stdout.unwrap_or(false),
        checkpoint_ms: u64::try_from(checkpoint_ms).unwrap_or(5_000),
        slice_ms: u64::try_from(slice_ms).unwrap_or(200),
        http_address: http_address(ck, s.http_address.as_deref()),
        retention: retention(ck, &s.retention),
    }
}

/// `[service.retention]`: each kind "forever" or a whole number of days, at least a week.
fn retention(
    ck: &mut Checker<'_>,
    r: &crate::config::raw::RawRetention,
) -> crate::sinks::retention::Retention {
    use crate::sinks::retention::{MIN_DAYS, Retention};
    let default = Retention::default();
    let mut days = |name: &str, text: Option<&String>, fallback: Option<u32>| -> Option<u32> {
        let key = KeyPath::keys("service.retention").key(name);
        match text.map(|t| t.trim()) {
            None => fallback,
            Some("forever") => None,
            Some(t) => {
                let ms = ck.duration(&key, Some(&t.to_string()), 0);
                let d = u32::try_from(ms / 86_400_000).unwrap_or(u32::MAX);
                if ms % 86_400_000 != 0 || d < MIN_DAYS {
                    ck.err(
                        &key,
                        format!(
                            "`{t}`: give whole days, at least {MIN_DAYS} (e.g. \"400d\"), or \"forever\""
                        ),
                    );
                }
                Some(d.max(MIN_DAYS))
            }
        }
    };
    Retention {
        soft_tags_days: days("soft_tags", r.soft_tags.as_ref(), default.soft_tags_days),
        alerts_days: days("alerts", r.alerts.as_ref(), default.alerts_days),
        reports_days: days("reports", r.reports.as_ref(), default.reports_days),
    }
}

/// The health and metrics endpoint: an address, or `off`.
fn http_address(ck: &mut Checker<'_>, text: Option<&str>) -> Option<std::net::SocketAddr> {
    match text.unwrap_or("127.0.0.1:9464") {
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
    }
}

/// The component library shared by the site: the built-in one, `[site] libraries`, then
/// `[site.components]`.
fn site_library(
    ck: &mut Checker<'_>,
    site: &RawSiteSection,
    main: &Arc<SourceText>,
    base: &Path,
) -> Result<Library, LocatedErrors> {
    let mut library = Library::builtin()?;
    for (i, lib) in site.libraries.iter().enumerate() {
        let p = resolve_path(base, lib);
        if let Err(e) = library.load(&p) {
            if e.0.iter().any(|le| le.location.line_col.is_none()) {
                ck.err(
                    &KeyPath::keys("site.libraries").index(i),
                    format!("cannot load library `{lib}`: {e}"),
                );
            } else {
                ck.extend(e.0);
            }
        }
    }
    for (id, spec) in &site.components {
        library.add(
            id,
            spec.clone(),
            Origin { source: main.clone(), key: KeyPath::keys("site.components").key(id) },
        );
    }
    Ok(library)
}

/// What every unit of the site shares.
struct SiteUnits<'a> {
    library: &'a Library,
    tz: &'a TimeZone,
    tz_name: &'a str,
    /// The output and the state directory, which no export directory may overlap.
    dirs: [&'a PathBuf; 2],
    /// Atmospheric pressure for gauge-pressure tags, Pa.
    atmosphere: f64,
}

impl SiteUnits<'_> {
    /// Check every unit (each in its own file's checker); the units without errors.
    fn check(&self, units: &[FoundUnit], errors: &mut Vec<LocatedError>) -> Vec<UnitConfig> {
        let mut checked = Vec::new();
        let mut names: HashMap<String, KeyPath> = HashMap::new();
        for (raw_unit, src, key) in units {
            let mut uck = Checker::new(src, errors).with_atmosphere(self.atmosphere).with_basis_units();
            if let Some(name) = &raw_unit.name
                && let Some(prev) = names.insert(name.to_lowercase(), key.clone())
            {
                uck.err(&key.key("name"), format!("unit name `{name}` is used twice (also at `{prev}`)"));
            }
            if let Some(u) = check_unit(&mut uck, raw_unit, src, key, self.library, self.tz, self.tz_name) {
                // The service must never read what it writes, nor write where it reads.
                let d = &u.input.directory;
                for (what, own) in [("output", self.dirs[0]), ("state", self.dirs[1])] {
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
        checked
    }
}

/// `[forward.syslog]`, checked; None when it has errors (they are in `ck`).
fn check_syslog(ck: &mut Checker<'_>, raw: &RawSyslog, state_dir: &Path) -> Option<SyslogConfig> {
    use crate::sinks::syslog::{self, Transport};
    let key = KeyPath::keys("forward.syslog");
    let before = ck.count();
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
        Some("relp") => Transport::Relp,
        Some(other) => {
            ck.err(
                &key.key("transport"),
                format!(
                    "unknown transport `{other}`; use \"tcp\" (framed, queued and resent), \"relp\" (acknowledged by the collector) or \"udp\""
                ),
            );
            Transport::Tcp
        }
    };
    let mut cfg = SyslogConfig::new(address, transport, state_dir.join("syslog-queue"));
    cfg.facility = facility(ck, &key.key("facility"), raw.facility.as_ref());
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
    (ck.count() == before).then_some(cfg)
}

/// A syslog facility: a name or a number 0–23 (default `local0`).
fn facility(ck: &mut Checker<'_>, key: &KeyPath, raw: Option<&RawFacility>) -> u8 {
    use crate::sinks::syslog::{self, DEFAULT_FACILITY};
    match raw {
        None => DEFAULT_FACILITY,
        Some(RawFacility::Number(n)) => match u8::try_from(*n) {
            Ok(f) if f <= 23 => f,
            _ => {
                ck.err(key, format!("facility {n} is out of range 0..=23"));
                DEFAULT_FACILITY
            }
        },
        Some(RawFacility::Name(name)) => syslog::facility_from_name(name).unwrap_or_else(|| {
            ck.err(
                key,
                format!("unknown facility `{name}`; use local0 … local7, a name like \"daemon\", or 0..=23"),
            );
            DEFAULT_FACILITY
        }),
    }
}
/// Why `dir` must not hold the service's state or outputs: a system directory (the service
/// would write among system files, and a mistyped path should not be "accepted"), or a shared
/// top-level folder itself.
pub(crate) fn system_dir_problem(dir: &Path) -> Option<String> {
    let mut norm = PathBuf::new();
    for c in dir.components() {
        match c {
            std::path::Component::ParentDir => {
                norm.pop();
            }
            std::path::Component::CurDir => {}
            other => norm.push(other),
        }
    }
    const SYSTEM: [&str; 11] =
        ["/etc", "/usr", "/bin", "/sbin", "/lib", "/lib64", "/boot", "/proc", "/sys", "/dev", "/efi"];
    const SHARED: [&str; 8] = ["/", "/var", "/var/lib", "/tmp", "/run", "/home", "/srv", "/opt"];
    let under_system = SYSTEM.iter().any(|s| norm.starts_with(s));
    let shared = SHARED.iter().any(|s| norm == Path::new(s));
    (under_system || shared).then(|| {
        format!(
            "{} is {}: give the service a folder of its own, e.g. /var/lib/efftemp/output",
            norm.display(),
            if under_system { "a system directory" } else { "a shared top-level folder" }
        )
    })
}

/// Why an existing state directory must not be used, if it must not. Requests in it are
/// obeyed (shelving alerts, re-learning a baseline) and its checkpoint is trusted, so nobody but
/// the service account may write there: a group- or world-writable directory is refused, the
/// sticky bit (mode 1777) included, since it still lets anyone plant a new file. A missing
/// directory is fine (the service creates it with mode 0750).
pub(crate) fn state_dir_problem(dir: &Path) -> Option<String> {
    let meta = std::fs::metadata(dir).ok()?;
    if !meta.is_dir() {
        return Some(format!("state directory {} exists and is not a directory", dir.display()));
    }
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt as _;
        let mode = meta.permissions().mode() & 0o7777;
        if crate::sinks::checkpoint::writable_by_others(mode) {
            let who = if mode & 0o002 != 0 { "world" } else { "group" };
            return Some(format!(
                "state directory {} is {who}-writable (mode {mode:04o}): another local user could plant \
                 requests or a checkpoint in it; make it owned by the service account with mode 0750 or 0700 \
                 (chmod 0750 {})",
                dir.display(),
                dir.display()
            ));
        }
    }
    None
}
