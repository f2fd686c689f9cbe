//! One unit's export files as a stream of parsed records: the [`Tailer`] delivers complete CSV
//! records, the [`RowParser`] turns them into samples, and everything either of them cannot
//! use is logged with its file, line and reason (the caller counts it).

use std::path::{Path, PathBuf};

use tracing::{debug, info, warn};

use crate::core::vocabulary::Sample;
use crate::ingest::rows::{HeaderInfo, Reject, RowParser};
use crate::ingest::settings::{InputConfig, Layout};
use crate::ingest::tail::{
    EndCause, GenerationCause, Notice, PollStats, RejectReason, TailEvent, TailOptions, TailState, Tailer,
};

/// What the reader delivers.
#[derive(Debug)]
pub enum Read<'a> {
    /// A data record: its samples and what of it was rejected.
    Record {
        /// The file.
        file: &'a Path,
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
            samples: Vec::new(),
            rejects: Vec::new(),
        }
    }

    /// Where to resume after a restart.
    pub fn state(&self) -> TailState {
        self.tailer.state()
    }

    /// Read what is new. A directory that cannot be listed is logged and retried at the next
    /// poll (its state is kept).
    pub fn poll(&mut self, now_mono: u64, on: &mut dyn FnMut(Read<'_>)) -> PollStats {
        let ExportReader { unit, wide, tailer, parser, samples, rejects, .. } = self;
        let stats = tailer.poll(now_mono, &mut |event| match event {
            TailEvent::Header { file, fields } => header(unit, *wide, file.path, parser.header(file.id, fields)),
            TailEvent::Record { file, record } => {
                samples.clear();
                rejects.clear();
                parser.record(file.id, record.len(), &|i| record.field(i), &mut |s| samples.push(s), rejects);
                for r in rejects.iter() {
                    warn!(unit = %unit, file = %file.path.display(), line = record.line, reason = r.code(), "rejected: {r}");
                }
                on(Read::Record { file: file.path, line: record.line, samples, rejects });
            }
            TailEvent::Rejected { file, line, reason } => {
                let (code, text) = describe_reject(&reason);
                warn!(unit = %unit, file = %file.path.display(), line, reason = code, "rejected: {text}");
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
                }
            }
        });
        let stats = stats.unwrap_or_else(|e| {
            // The directory could not be listed (e.g. a share briefly unmounted).
            warn!(unit = %self.unit, error = %e, "export directory unavailable; retrying at the next pass");
            PollStats::default()
        });
        if self.tailer.refused_links() != self.refused_links.as_slice() {
            for l in self.tailer.refused_links().iter().filter(|l| !self.refused_links.contains(l)) {
                warn!(unit = %self.unit, file = %l.display(), "symbolic link to a file outside the export directory: not read (set `links_outside = true` under [unit.input] to allow)");
            }
            self.refused_links = self.tailer.refused_links().to_vec();
        }
        stats
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
            warn!(unit = %unit, file = %file.display(), reason = r.code(), "export file cannot be used: {r}; its rows are rejected");
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
