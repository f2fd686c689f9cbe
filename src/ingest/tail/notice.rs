//! What the tailer tells its sink: events, notices about files, rejections, counters and errors.

use std::io;
use std::path::{Path, PathBuf};

use crate::ingest::split::RawRecord;

/// A file generation as seen by the sink.
#[derive(Clone, Copy, Debug)]
pub struct FileRef<'a> {
    /// Current path of the file.
    pub path: &'a Path,
    /// Generation id (stable across restarts; increases in discovery order; 0 for a file that
    /// is not tracked, in [`Notice::Error`]).
    pub id: u64,
}

/// Why a record or fragment was not delivered.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum RejectReason {
    /// Longer than `max_record_bytes`; skipped up to the next line break.
    TooLong {
        /// Bytes skipped.
        bytes: u64,
    },
    /// A run of NUL bytes (a copy-truncate hole or a preallocated region).
    NulRun {
        /// Bytes skipped.
        bytes: u64,
    },
    /// A record containing NUL bytes (a region overwritten with zeros).
    ContainsNul,
    /// An unterminated last row of a sealed file (the writer stopped mid-row). Delivered after
    /// all if the file grows and completes it.
    Unterminated {
        /// Bytes of the fragment.
        bytes: u64,
    },
    /// The header row is not valid UTF-8 (names are passed on with replacement characters).
    InvalidHeader,
}

/// Why a new generation replaced an earlier one at the same place.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum GenerationCause {
    /// Same file (inode), content no longer continues what was read: truncated or rewritten.
    Truncated,
    /// Another file now has the path: replaced, or deleted and recreated.
    Replaced,
}

/// Why a generation stopped being tracked.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum EndCause {
    /// Its file left the directory (deleted, or renamed out of the pattern) and was read to
    /// its end through the open handle, or was already gone when the tailer started.
    Removed,
    /// Its content was truncated or overwritten and found in no other file.
    Overwritten,
}

/// Something that happened to a file (for logs and metrics).
#[derive(Debug)]
pub enum Notice {
    /// A file not seen before: read from its first data row.
    Discovered,
    /// A new generation where generation `previous` was.
    NewGeneration {
        /// Id of the generation it replaces.
        previous: u64,
        /// How it replaced it.
        cause: GenerationCause,
    },
    /// Matched to a saved checkpoint; reading continues at `offset`.
    Resumed {
        /// The checkpoint offset.
        offset: u64,
    },
    /// Same file, new name (rotation by rename).
    Renamed {
        /// Previous path.
        from: PathBuf,
    },
    /// The generation's content now lives in this file (the copy of a copy-truncate rotation,
    /// or an atomic replacement with a superset); reading continues at the checkpoint.
    Continued {
        /// Path of the file it was read from before.
        from: PathBuf,
    },
    /// The header differs from the previous file's.
    HeaderChanged {
        /// The previous file's header.
        previous: Vec<String>,
    },
    /// Read to the end and closed (see
    /// [`TailOptions::seal_after_ms`](super::TailOptions::seal_after_ms)).
    Sealed {
        /// Unterminated bytes left at the end (also reported as [`RejectReason::Unterminated`]).
        fragment_bytes: u64,
    },
    /// A sealed file changed and is read again from its checkpoint.
    Unsealed,
    /// No longer tracked.
    Ended {
        /// Why.
        cause: EndCause,
        /// Bytes after the checkpoint that were never delivered (known size minus checkpoint):
        /// non-zero means rows may have been lost before the tailer could read them.
        unread_bytes: u64,
    },
    /// An I/O error on this file; it is retried at the next poll.
    Error(TailError),
}

/// What [`Tailer::poll`](super::Tailer::poll) passes to its sink, in a deterministic order.
#[derive(Debug)]
pub enum TailEvent<'a> {
    /// The header row of a generation: sent before its first record, and again before the
    /// first record after every (re)open, resume or continuation, so that the consumer can map
    /// columns without keeping state.
    Header {
        /// The file.
        file: FileRef<'a>,
        /// Column names.
        fields: &'a [String],
    },
    /// A complete data record.
    Record {
        /// The file.
        file: FileRef<'a>,
        /// The record (borrowed: copy what must outlive the call).
        record: RawRecord<'a>,
    },
    /// Bytes that could not be delivered: to be counted and logged with file, line and reason.
    Rejected {
        /// The file.
        file: FileRef<'a>,
        /// First line concerned.
        line: u64,
        /// Why.
        reason: RejectReason,
    },
    /// Something happened to a file.
    Notice {
        /// The file.
        file: FileRef<'a>,
        /// What.
        notice: Notice,
    },
}

/// Counters of one poll.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct PollStats {
    /// Generations tracked after the poll (sealed ones included).
    pub files: usize,
    /// Open file handles after the poll.
    pub open: usize,
    /// Bytes read (probes and marker checks included).
    pub bytes_read: u64,
    /// Records delivered.
    pub records: u64,
    /// Rejections reported.
    pub rejected: u64,
    /// Matching names that are symbolic links to files outside the directory, not read (see
    /// [`TailOptions::links_outside`](super::TailOptions::links_outside)).
    pub links_refused: usize,
    /// The poll stopped at its read budget ([`Tailer::poll_within`](super::Tailer::poll_within)):
    /// the files hold more data, or there are files not yet opened.
    pub more: bool,
    /// Data bytes known to be waiting when `more` is set (in files being read, and the sizes
    /// of files not yet opened).
    pub unread_bytes: u64,
}

/// Errors of the tailer.
#[derive(Debug, thiserror::Error)]
pub enum TailError {
    /// The directory could not be listed; nothing was changed (state is kept: a share that is
    /// briefly unmounted must not make the tailer forget its files).
    #[error("cannot list directory {dir}: {source}")]
    ListDir {
        /// The directory.
        dir: PathBuf,
        /// The cause.
        source: io::Error,
    },
    /// A file operation failed.
    #[error("cannot {op} {path}: {source}")]
    File {
        /// What was attempted.
        op: &'static str,
        /// The file.
        path: PathBuf,
        /// The cause.
        source: io::Error,
    },
}
