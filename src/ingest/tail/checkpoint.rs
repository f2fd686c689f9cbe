//! The saved form of the tailer's progress: one checkpoint per file generation, in a versioned
//! state.

use serde::{Deserialize, Serialize};

use crate::hash::fnv1a64;
use crate::ingest::split::Position;

/// Version of the [`TailState`] format written by this build.
pub const STATE_VERSION: u32 = 1;

/// Device and inode of a file: a hint for matching (see the [tailer's docs](super)).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
pub struct FileId {
    /// Device number.
    pub dev: u64,
    /// Inode number.
    pub ino: u64,
}

/// The checkpoint of one file generation.
///
/// Fields are public so that tools can inspect a saved state; [`Tailer::new`](super::Tailer::new)
/// checks them and drops an inconsistent entry (its file is then read again from the start:
/// duplicates, not loss).
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct FileCheckpoint {
    /// Generation id, unique within the state; increases in discovery order.
    pub id: u64,
    /// Last known file name in the directory (a hint).
    pub name: String,
    /// Last known device and inode (a hint).
    pub file_id: Option<FileId>,
    /// Hash of the header fields; `None` while the header row is incomplete (nothing read yet).
    pub header_hash: Option<u64>,
    /// The header this generation took from the directory because its file starts with a NUL
    /// hole (a copy-truncate writer that kept writing rows without a header).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub inherited_header: Option<Vec<String>>,
    /// Offset of the first byte after the header row.
    pub data_start: u64,
    /// Length of the fingerprinted data prefix (at most the committed data).
    pub fingerprint_len: u64,
    /// Hash of `data_start .. data_start + fingerprint_len`.
    pub fingerprint: u64,
    /// The checkpoint: start of the first record not yet delivered (a record boundary).
    pub resume: Position,
    /// Length of the marker window just before `resume.offset`.
    pub marker_len: u64,
    /// Hash of the marker window.
    pub marker: u64,
    /// File size when last examined.
    pub size: u64,
    /// Modification time (ns since the epoch) when last examined.
    pub mtime_ns: Option<i64>,
    /// Whether the generation is sealed (read to its end, handle closed).
    pub sealed: bool,
    /// Its file had left the directory (it was being read through its open handle): after a
    /// restart its name and inode may belong to another file, so it can only be found again by
    /// content.
    #[serde(default)]
    pub gone: bool,
}

impl FileCheckpoint {
    /// The checkpoint of a file seen for the first time: nothing read, header unknown.
    pub(super) fn fresh(id: u64, name: String, file_id: Option<FileId>) -> FileCheckpoint {
        FileCheckpoint {
            id,
            name,
            file_id,
            header_hash: None,
            inherited_header: None,
            data_start: 0,
            fingerprint_len: 0,
            fingerprint: fnv1a64(b""),
            resume: Position::START,
            marker_len: 0,
            marker: fnv1a64(b""),
            size: 0,
            mtime_ns: None,
            sealed: false,
            gone: false,
        }
    }
}

/// Everything needed to resume tailing a directory: a versioned list of checkpoints.
#[derive(Serialize, Deserialize, Clone, Debug, PartialEq)]
pub struct TailState {
    /// Format version ([`STATE_VERSION`]); another version is ignored (and everything read
    /// again) rather than misread.
    pub version: u32,
    /// Next generation id to hand out.
    pub next_id: u64,
    /// Header of the most recently discovered file, for
    /// [`Notice::HeaderChanged`](super::Notice::HeaderChanged) and for files that start with a
    /// NUL hole.
    pub last_header: Option<Vec<String>>,
    /// Per-generation checkpoints, by id.
    pub files: Vec<FileCheckpoint>,
}

impl Default for TailState {
    fn default() -> Self {
        TailState { version: STATE_VERSION, next_id: 1, last_header: None, files: Vec::new() }
    }
}
