//! One unit's export files as a stream of parsed records: the [`Tailer`] delivers complete CSV
//! records, the [`RowParser`] turns them into samples, and everything either of them cannot
//! use is logged with its file, line and reason (the caller counts it). Repeated reasons in a
//! file are logged once and then summed up per pass ([`RepeatLog`]).

use std::path::{Path, PathBuf};

use tracing::{debug, info, warn};

use crate::core::vocabulary::Sample;
use crate::ingest::repeat::{RepeatLog, warn_summary};
use crate::ingest::rows::{HeaderInfo, Reject, RowParser};
use crate::ingest::settings::{InputConfig, Layout};
use crate::ingest::tail::{
    EndCause, GenerationCause, Notice, PollLimits, PollStats, RejectReason, TailEvent, TailOptions,
    TailState, Tailer,
};

/// What the reader delivers.
#[derive(Debug)]
pub enum Read<'a> {
    /// A data record: its samples and what of it was rejected.
    Record {
        /// The file (its name now).
        file: &'a Path,
        /// The file's generation id (stable across renames and restarts).
        id: u64,
        /// Its line.
        line: u64,
        /// The values it carries.
        samples: &'a [Sample],
        /// What could not be used (already logged).
        rejects: &'a [Reject],
    },
    /// A record the tailer could not deliver (already logged), by reason code.
    Rejected {
        /// Reason code (`line_too_long`, `nul_bytes`, `unterminated`, `bad_header`).
        code: &'static str,
    },
}

/// The export files of one unit, read incrementally.
pub struct ExportReader {
    unit: String,
    wide: bool,
    tailer: Tailer,
    parser: RowParser,
    /// Links refused at the last poll (warned about when the set changes).
    refused_links: Vec<PathBuf>,
    /// Why the export directory could not be listed at the last poll.
    unavailable: Option<String>,
    /// Repeated rejections, logged once per file and reason, then summed up.
    repeats: RepeatLog,
    samples: Vec<Sample>,
    rejects: Vec<Reject>,
}

impl ExportReader {
    /// The reader of `unit`'s files, resuming from a saved tailer state.
    pub fn new(
        unit: &str,
        input: &InputConfig,
        options: TailOptions,
        tag_names: &[String],
        saved: Option<TailState>,
    ) -> ExportReader {
        ExportReader {
            unit: unit.to_string(),
            wide: matches!(input.layout, Layout::Wide),
            tailer: Tailer::new(input.directory.clone(), options, saved),
            parser: RowParser::new(input, tag_names),
            refused_links: Vec::new(),
            unavailable: None,
            repeats: RepeatLog::default(),
            samples: Vec::new(),
            rejects: Vec::new(),
        }
    }

    /// Where to resume after a restart.
    pub fn state(&self) -> TailState {
        self.tailer.state()
    }

    /// Why the export directory could not be read at the last poll (`None`: it could).
    pub fn unavailable(&self) -> Option<&str> {
        self.unavailable.as_deref()
    }

    /// Header rows found again mid-file, by file id (kept in the checkpoint).
    pub fn header_overrides(&self) -> &std::collections::BTreeMap<u64, Vec<String>> {
        self.parser.overrides()
    }

    /// Restore the mid-file headers of a checkpoint.
    pub fn restore_header_overrides(&mut self, saved: std::collections::BTreeMap<u64, Vec<String>>) {
        self.parser.restore_overrides(saved);
    }

    /// The unit's newest data time (see [`RowParser::note_data_time`]).
    pub fn note_data_time(&mut self, ms: Option<i64>) {
        self.parser.note_data_time(ms);
    }

    /// Read what is new, within `limits` (see [`Tailer::poll_within`]). A directory that
    /// cannot be listed is logged (once, until it can be listed again) and retried at the next
    /// poll (its state is kept).
    pub fn poll(&mut self, limits: &PollLimits, on: &mut dyn FnMut(Read<'_>)) -> PollStats {
        let ExportReader { unit, wide, tailer, parser, samples, rejects, repeats, .. } = self;
        let stats = tailer.poll_within(limits, &mut |event| match event {
            TailEvent::Header { file, fields } => {
                let info = parser.header(file.id, fields);
                if let HeaderInfo::Unusable(r) = &info {
                    repeats.logged(file.id, file.path, r.code());
                }
                header(unit, *wide, file.path, info);
            }
            TailEvent::Record { file, record } => {
                samples.clear();
                rejects.clear();
                parser.record(file.id, record.len(), &|i| record.field(i), &mut |s| samples.push(s), rejects);
                for r in rejects.iter() {
                    let line = record.line;
                    if repeats.first(file.id, file.path, r.code(), line, || format!("rejected: {r}")) {
                        warn!(unit = %unit, file = %file.path.display(), line, reason = r.code(), "rejected: {r}");
                    }
                }
                on(Read::Record { file: file.path, id: file.id, line: record.line, samples, rejects });
            }
            TailEvent::Rejected { file, line, reason } => {
                let (code, text) = describe_reject(&reason);
                if repeats.first(file.id, file.path, code, line, || format!("rejected: {text}")) {
                    warn!(unit = %unit, file = %file.path.display(), line, reason = code, "rejected: {text}");
                }
                on(Read::Rejected { code });
            }
            TailEvent::Notice { file, notice } => {
                let (serious, text) = describe_notice(&notice);
                if serious {
                    warn!(unit = %unit, file = %file.path.display(), "{text}");
                } else {
                    info!(unit = %unit, file = %file.path.display(), "{text}");
                }
                if matches!(notice, Notice::Sealed { .. } | Notice::Ended { .. }) {
                    parser.forget(file.id);
                    for s in repeats.finish(file.id) {
                        warn_summary(unit, &s);
                    }
                }
            }
        });
        for s in self.repeats.take() {
            warn_summary(&self.unit, &s);
        }
        let stats = match stats {
            Ok(stats) => {
                if self.unavailable.take().is_some() {
                    info!(unit = %self.unit, dir = %self.tailer.dir().display(), "export directory available again");
                }
                stats
            }
            Err(e) => {
                // The directory could not be listed (missing, or a share briefly unmounted).
                let why = unavailable_reason(self.tailer.dir(), &e);
                if self.unavailable.as_deref() != Some(why.as_str()) {
                    warn!(unit = %self.unit, dir = %self.tailer.dir().display(), error = %e, "{why}; nothing is read from it until it can be");
                }
                self.unavailable = Some(why);
                PollStats::default()
            }
        };
        if self.tailer.refused_links() != self.refused_links.as_slice() {
            for l in self.tailer.refused_links().iter().filter(|l| !self.refused_links.contains(l)) {
                warn!(unit = %self.unit, file = %l.display(), "symbolic link to a file outside the export directory: not read (set `links_outside = true` under [unit.input] to allow)");
            }
            self.refused_links = self.tailer.refused_links().to_vec();
        }
        stats
    }
}

/// The sentence for an export directory that cannot be listed.
fn unavailable_reason(dir: &Path, e: &crate::ingest::tail::TailError) -> String {
    match std::fs::metadata(dir) {
        Err(m) if m.kind() == std::io::ErrorKind::NotFound => {
            format!("export directory {} does not exist", dir.display())
        }
        Ok(m) if !m.is_dir() => format!("export directory {} is not a directory", dir.display()),
        _ => format!("export directory {} cannot be read: {e}", dir.display()),
    }
}

fn header(unit: &str, wide: bool, file: &Path, info: HeaderInfo) {
    match info {
        HeaderInfo::Mapped { missing_tags, ignored_columns } => {
            if !missing_tags.is_empty() && wide {
                warn!(unit = %unit, file = %file.display(), missing = %missing_tags.join(", "), "export file lacks columns for some tags");
            }
            debug!(unit = %unit, file = %file.display(), ignored_columns, "header read");
        }
        HeaderInfo::Unusable(r) => {
            warn!(unit = %unit, file = %file.display(), line = 1, reason = r.code(), "export file cannot be used: {r}; its rows are rejected and counted (one summary per pass)");
        }
    }
}

/// Reason code and sentence of a tailer rejection.
fn describe_reject(r: &RejectReason) -> (&'static str, String) {
    match r {
        RejectReason::TooLong { bytes } => (
            "line_too_long",
            format!("record of {bytes} bytes exceeds max_record_bytes; skipped to the next line"),
        ),
        RejectReason::NulRun { bytes } => {
            ("nul_bytes", format!("{bytes} NUL bytes (a copy-truncate hole or preallocated space) skipped"))
        }
        RejectReason::ContainsNul => ("nul_bytes", "record contains NUL bytes".to_string()),
        RejectReason::Unterminated { bytes } => {
            ("unterminated", format!("the file was finished with an incomplete last row of {bytes} bytes"))
        }
        RejectReason::InvalidHeader => ("bad_header", "the header row is not valid UTF-8".to_string()),
    }
}

/// Whether a tailer notice deserves a warning, and its sentence.
fn describe_notice(n: &Notice) -> (bool, String) {
    match n {
        Notice::Discovered => (false, "new export file: reading from its first row".into()),
        Notice::NewGeneration { previous, cause } => (
            true,
            match cause {
                GenerationCause::Truncated => format!(
                    "file truncated or rewritten (was generation {previous}): reading it again from its first row; rows already read are not used twice"
                ),
                GenerationCause::Replaced => format!(
                    "file replaced by another (was generation {previous}): reading the new one from its first row"
                ),
            },
        ),
        Notice::Resumed { offset } => (false, format!("resuming at byte {offset}")),
        Notice::Renamed { from } => (false, format!("renamed from {} (rotation)", from.display())),
        Notice::Continued { from } => (
            false,
            format!(
                "continues {} (copy or superset replacement): reading on from the checkpoint",
                from.display()
            ),
        ),
        Notice::HeaderChanged { previous } => {
            (true, format!("the header differs from the previous file's ({} columns before)", previous.len()))
        }
        Notice::Sealed { fragment_bytes } => (
            *fragment_bytes > 0,
            format!("file finished and closed ({fragment_bytes} unterminated bytes at its end)"),
        ),
        Notice::Unsealed => (false, "a finished file changed: reading on".into()),
        Notice::Ended { cause, unread_bytes } => (*unread_bytes > 0, ended(*cause, *unread_bytes)),
        Notice::Error(e) => (true, format!("I/O error, retrying: {e}")),
    }
}

fn ended(cause: EndCause, unread_bytes: u64) -> String {
    format!(
        "file no longer tracked ({}){}",
        match cause {
            EndCause::Removed => "removed",
            EndCause::Overwritten => "overwritten",
        },
        if unread_bytes > 0 {
            format!("; {unread_bytes} bytes were never read (rows lost before efftemp could read them)")
        } else {
            String::new()
        }
    )
}
