//! The directory tailer: turns a directory of growing, rotating CSV export files into a stream
//! of complete records, with checkpoints that survive restarts.
//!
//! The design follows `research/tailing.md` §5 (fault checklist in §4). In short:
//!
//! * **Reconcile, don't trust events.** [`Tailer::poll`] lists the directory and reconciles
//!   it with what it knows. File-system events (if the caller uses them) only decide *when* to
//!   poll; a lost, duplicated or reordered event costs latency, never rows.
//! * **Identity is content.** Every export starts with the same header row, so a generation of
//!   a file is identified by the bytes after its header: a hash of the first
//!   `fingerprint_bytes` of committed data (a growing prefix while the file is shorter). A
//!   generation whose header row is all it has is matched by path. The file id (device and
//!   inode) and the name are hints that find the file quickly and break ties; alone they never
//!   justify resuming an offset (inodes are reused, names are rotated).
//! * **Validated resume.** A checkpoint is the start of the first record not yet delivered,
//!   plus a hash of the `marker_bytes` before it. Reading resumes there only if the file is at
//!   least that long and the hash matches; otherwise the file holds a new generation (truncated,
//!   rewritten, replaced) and is read from its data start.
//! * **Handles outlive names.** Tracked files stay open, so a file renamed out of the pattern
//!   or deleted is still read to its end. A handle is closed when its file is *sealed*: quiet
//!   for `seal_after_ms` and either gone from the directory or no longer the newest file.
//!   Sealing is the only thing that turns a held-back unterminated row into a rejected
//!   fragment; if the file grows later it is unsealed and read from the row's start.
//! * **Never from the end.** A file without a checkpoint is read from its first data row.
//!
//! Delivery is at least once. A row is delivered again after a restart from an older state
//! (a crash between delivery and checkpoint) and when a file is replaced by different content
//! that repeats earlier rows; the consumer de-duplicates by its natural key (tag and
//! timestamp). No complete row that existed at a poll is skipped, and no partial row is ever
//! delivered.
//!
//! Known limits, by design:
//! * An unchanged `(file id, size, mtime)` is trusted without reading: a file rewritten to the
//!   same size within one timestamp tick is noticed only at its next change.
//! * A candidate file whose content continues a live tracked file (a `cp` of it, the first half
//!   of a copy-truncate rotation) is held back for `seal_after_ms` so that the truncation can
//!   reveal it as the continuation; two distinct files that really share their first rows are
//!   therefore read with that delay.
//! * Resynchronising after a too-long record, and skipping NUL holes, assume rows do not start
//!   inside quoted fields.
//! * One `stat` per poll is believed. On a network share with stale attributes (§4 F3) a
//!   shrink is taken at face value; the marker check still keeps rows from being skipped, at
//!   the cost of duplicates.
//! * One tailer per export stream: sealing assumes that the newest matching file is the one
//!   being written, so two streams in one directory need two patterns.

use std::collections::HashMap;
use std::fs::{self, File};
use std::io;
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use crate::hash::fnv1a64;
use crate::ingest::split::{HeldKind, Item, Position, RawRecord, Splitter};

/// Version of the [`TailState`] format written by this build.
pub const STATE_VERSION: u32 = 1;

/// Bytes read per probe of a file's first row.
const PROBE_CHUNK: usize = 8 * 1024;

/// Tailer settings.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct TailOptions {
    /// Glob on the file *name* (not the path): `*` matches any run of characters, `?` one
    /// character, everything else itself. Temporary files of atomic writers must not match.
    pub pattern: String,
    /// Largest raw record, terminator included; longer ones are rejected and skipped. Bounds the
    /// memory a broken file (an unclosed quote) can take.
    pub max_record_bytes: usize,
    /// Bytes of committed data after the header that identify a file generation (at least 1).
    pub fingerprint_bytes: usize,
    /// Bytes before a checkpoint whose hash must match for a resume (at least 1).
    pub marker_bytes: usize,
    /// Quiet time (caller's monotonic milliseconds) before a file that has a newer sibling, or
    /// has left the directory, is sealed and its handle closed. It bounds how long an
    /// unterminated last row waits before it is reported, and how long a copy of a live file
    /// is held back (see the module docs); choose it well above the exporter's write interval.
    pub seal_after_ms: u64,
    /// Bytes per read call.
    pub read_chunk: usize,
    /// Follow a symbolic link whose target lies outside the directory. Off by default: such
    /// links are listed by [`Tailer::refused_links`] and not read. Links to files inside the
    /// directory are always followed and keyed by their target (a link and its target are
    /// read once).
    pub links_outside: bool,
}

impl Default for TailOptions {
    fn default() -> Self {
        TailOptions {
            pattern: "*.csv".to_owned(),
            max_record_bytes: 1 << 20,
            fingerprint_bytes: 1024,
            marker_bytes: 64,
            seal_after_ms: 10 * 60 * 1000,
            read_chunk: 256 * 1024,
            links_outside: false,
        }
    }
}

/// Device and inode of a file: a hint for matching (see the module docs).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
pub struct FileId {
    /// Device number.
    pub dev: u64,
    /// Inode number.
    pub ino: u64,
}

/// The checkpoint of one file generation.
///
/// Fields are public so that tools can inspect a saved state; [`Tailer::new`] checks them and
/// drops an inconsistent entry (its file is then read again from the start: duplicates, not
/// loss).
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
    fn fresh(id: u64, name: String, file_id: Option<FileId>) -> FileCheckpoint {
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
    /// Header of the most recently discovered file, for [`Notice::HeaderChanged`] and for files
    /// that start with a NUL hole.
    pub last_header: Option<Vec<String>>,
    /// Per-generation checkpoints, by id.
    pub files: Vec<FileCheckpoint>,
}

impl Default for TailState {
    fn default() -> Self {
        TailState { version: STATE_VERSION, next_id: 1, last_header: None, files: Vec::new() }
    }
}

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
    /// Read to the end and closed (see [`TailOptions::seal_after_ms`]).
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
        /// non-zero means rows may have been lost before the tailer could read them (E4).
        unread_bytes: u64,
    },
    /// An I/O error on this file; it is retried at the next poll.
    Error(TailError),
}

/// What [`Tailer::poll`] passes to its sink, in a deterministic order.
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
    /// [`TailOptions::links_outside`]).
    pub links_refused: usize,
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

/// Cheap facts about a file, for the unchanged-file fast path.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
struct Meta {
    id: Option<FileId>,
    size: u64,
    mtime_ns: Option<i64>,
}

impl Meta {
    fn of(m: &fs::Metadata) -> Meta {
        let mtime_ns = m
            .modified()
            .ok()
            .and_then(|t| t.duration_since(std::time::UNIX_EPOCH).ok())
            .and_then(|d| i64::try_from(d.as_nanos()).ok());
        Meta { id: file_id(m), size: m.len(), mtime_ns }
    }
}

#[cfg(unix)]
fn file_id(m: &fs::Metadata) -> Option<FileId> {
    use std::os::unix::fs::MetadataExt;
    Some(FileId { dev: m.dev(), ino: m.ino() })
}

#[cfg(not(unix))]
fn file_id(_: &fs::Metadata) -> Option<FileId> {
    None
}

/// Read at an absolute offset without moving a shared cursor.
fn read_at(file: &File, buf: &mut [u8], off: u64) -> io::Result<usize> {
    loop {
        #[cfg(unix)]
        let r = {
            use std::os::unix::fs::FileExt;
            file.read_at(buf, off)
        };
        #[cfg(not(unix))]
        let r = {
            use std::io::{Read, Seek, SeekFrom};
            let mut f = file;
            f.seek(SeekFrom::Start(off)).and_then(|_| f.read(buf))
        };
        match r {
            Err(e) if e.kind() == io::ErrorKind::Interrupted => continue,
            r => return r,
        }
    }
}

/// Read up to `len` bytes at `off` (fewer at end of file).
fn read_span(file: &File, off: u64, len: u64, stats: &mut PollStats) -> io::Result<Vec<u8>> {
    let len = usize::try_from(len).unwrap_or(usize::MAX);
    let mut out = vec![0; len];
    let mut got = 0;
    while got < len {
        let n = read_at(file, &mut out[got..], off + got as u64)?;
        if n == 0 {
            break;
        }
        got += n;
    }
    out.truncate(got);
    stats.bytes_read += got as u64;
    Ok(out)
}

/// Hash of header fields (order and content; independent of quoting, BOM and line endings).
fn header_hash(fields: &[String]) -> u64 {
    let mut bytes = Vec::new();
    for f in fields {
        bytes.extend_from_slice(f.as_bytes());
        bytes.push(0x1f);
    }
    fnv1a64(&bytes)
}

/// The last `n` bytes of `a ++ b`.
fn last_bytes(a: &[u8], b: &[u8], n: usize) -> Vec<u8> {
    if b.len() >= n {
        return b[b.len() - n..].to_vec();
    }
    let from_a = (n - b.len()).min(a.len());
    let mut v = a[a.len() - from_a..].to_vec();
    v.extend_from_slice(b);
    v
}

/// The header row as resolved for a generation.
#[derive(Clone, Debug)]
struct HeaderInfo {
    fields: Vec<String>,
    hash: u64,
    /// Boundary after the header row (the data start).
    data_start: Position,
    inherited: bool,
    utf8_ok: bool,
    too_long: bool,
}

/// The first row of a file, found by [`probe`].
#[derive(Clone, Debug)]
struct First {
    fields: Vec<String>,
    utf8_ok: bool,
    too_long: bool,
    next: Position,
}

/// What the start of a file looks like.
#[derive(Clone, Debug)]
struct Probe {
    /// The file starts with a NUL hole.
    hole: bool,
    /// Its first row, if complete.
    first: Option<First>,
}

impl Probe {
    /// The header for a generation: the first row, unless the file starts with a NUL hole and
    /// `inherit` (the directory's header) is known and differs from that row, in which case the
    /// writer continued without a header and every row after the hole is data.
    fn resolve(&self, inherit: Option<&[String]>) -> Option<HeaderInfo> {
        let first = self.first.as_ref()?;
        if let Some(h) = inherit.filter(|h| self.hole && first.fields != *h) {
            return Some(HeaderInfo {
                fields: h.to_vec(),
                hash: header_hash(h),
                data_start: Position::START,
                inherited: true,
                utf8_ok: true,
                too_long: false,
            });
        }
        Some(HeaderInfo {
            fields: first.fields.clone(),
            hash: header_hash(&first.fields),
            data_start: first.next,
            inherited: false,
            utf8_ok: first.utf8_ok,
            too_long: first.too_long,
        })
    }
}

/// Find the first row of a file (after a leading NUL hole, if any).
fn probe(file: &File, max_record: usize, stats: &mut PollStats) -> io::Result<Probe> {
    let mut split = Splitter::new(max_record);
    let mut buf = vec![0; PROBE_CHUNK];
    let mut off = 0u64;
    let mut hole = false;
    let mut first: Option<First> = None;
    while first.is_none() {
        let n = read_at(file, &mut buf, off)?;
        if n == 0 {
            break;
        }
        stats.bytes_read += n as u64;
        off += n as u64;
        split.feed(&buf[..n], &mut |item| {
            if first.is_some() {
                return;
            }
            match item {
                Item::NulRun(_) => hole = true,
                Item::Record(r) => {
                    let mut utf8_ok = true;
                    let fields = r
                        .iter()
                        .map(|f| match std::str::from_utf8(f) {
                            Ok(s) => s.to_owned(),
                            Err(_) => {
                                utf8_ok = false;
                                String::from_utf8_lossy(f).into_owned()
                            }
                        })
                        .collect();
                    first = Some(First { fields, utf8_ok, too_long: false, next: r.next_position() });
                }
                Item::TooLong(s) => {
                    first = Some(First {
                        fields: Vec::new(),
                        utf8_ok: true,
                        too_long: true,
                        next: s.next_position(),
                    })
                }
            }
        });
    }
    Ok(Probe { hole, first })
}

/// What a successful content check read: the bytes before the checkpoint and the data prefix.
struct Proof {
    header: HeaderInfo,
    tail: Vec<u8>,
    prefix: Vec<u8>,
}

/// Whether `file` (of `size` bytes, first row `pr`) holds the content `cp` committed: same
/// header, same fingerprint, long enough, same marker before the checkpoint. Needs a header.
fn check_content(
    cp: &FileCheckpoint,
    file: &File,
    size: u64,
    pr: &Probe,
    opts: &TailOptions,
    stats: &mut PollStats,
) -> io::Result<Option<Proof>> {
    let Some(hash) = cp.header_hash else { return Ok(None) };
    let Some(header) = pr.resolve(cp.inherited_header.as_deref()) else { return Ok(None) };
    let at = cp.resume.offset;
    if header.hash != hash || header.data_start.offset != cp.data_start || size < at {
        return Ok(None);
    }
    let committed = at - cp.data_start;
    let want = (opts.fingerprint_bytes as u64).min(committed).max(cp.fingerprint_len);
    let prefix = read_span(file, cp.data_start, want, stats)?;
    let Some(fp) = prefix.get(..usize::try_from(cp.fingerprint_len).unwrap_or(usize::MAX)) else {
        return Ok(None);
    };
    if fnv1a64(fp) != cp.fingerprint {
        return Ok(None);
    }
    let tail = read_span(file, at - cp.marker_len, cp.marker_len, stats)?;
    if tail.len() as u64 != cp.marker_len || fnv1a64(&tail) != cp.marker {
        return Ok(None);
    }
    Ok(Some(Proof { header, tail, prefix }))
}

/// A tracked file generation (in memory).
#[derive(Debug)]
struct Tracked {
    cp: FileCheckpoint,
    path: PathBuf,
    /// Header fields (empty while the header is pending).
    fields: Vec<String>,
    handle: Option<File>,
    split: Option<Splitter>,
    /// Offset of the next byte to read (≥ checkpoint; the splitter holds the bytes between).
    read_end: u64,
    /// The last `marker_bytes` (or fewer) bytes before `read_end`.
    recent: Vec<u8>,
    /// The bytes of the marker window before the checkpoint.
    commit_tail: Vec<u8>,
    /// Data bytes read from `data_start`, up to `fingerprint_bytes`.
    prefix: Vec<u8>,
    header_sent: bool,
    /// When the file last grew (or was (re)opened), caller's clock.
    last_growth_ms: u64,
    /// Found in the directory listing in this poll.
    present: bool,
    /// Content checked in this process (a loaded checkpoint is not, until matched).
    validated: bool,
    /// Detached in this poll: its file no longer holds its content.
    detached: bool,
    /// A read failed: look at the file again at the next poll even if it looks unchanged.
    stale: bool,
}

impl Tracked {
    fn from_checkpoint(cp: FileCheckpoint, dir: &Path) -> Tracked {
        Tracked {
            path: dir.join(&cp.name),
            read_end: cp.resume.offset,
            cp,
            fields: Vec::new(),
            handle: None,
            split: None,
            recent: Vec::new(),
            commit_tail: Vec::new(),
            prefix: Vec::new(),
            header_sent: false,
            last_growth_ms: 0,
            present: false,
            validated: false,
            detached: false,
            stale: false,
        }
    }

    fn file_ref(&self) -> FileRef<'_> {
        FileRef { path: &self.path, id: self.cp.id }
    }

    /// Start reading `file` at the checkpoint, with the bytes a content check read.
    fn attach(
        &mut self,
        file: File,
        header: HeaderInfo,
        tail: Vec<u8>,
        mut prefix: Vec<u8>,
        opts: &TailOptions,
    ) {
        prefix.truncate(usize::try_from(self.cp.resume.offset - self.cp.data_start).unwrap_or(usize::MAX));
        self.fields = header.fields;
        self.handle = Some(file);
        let mut split = Splitter::new(opts.max_record_bytes);
        split.reset(self.cp.resume);
        self.split = Some(split);
        self.read_end = self.cp.resume.offset;
        self.recent = tail.clone();
        self.commit_tail = tail;
        self.prefix = prefix;
        self.header_sent = false;
        self.cp.sealed = false;
        self.validated = true;
        self.detached = false;
    }

    /// Forget held bytes and read again from the checkpoint.
    fn rewind(&mut self) {
        rewind_to_checkpoint(
            &self.cp,
            self.split.as_mut(),
            &mut self.read_end,
            &mut self.recent,
            &self.commit_tail,
            &mut self.prefix,
        );
    }

    /// Drop the handle and buffers (sealing, detaching).
    fn close(&mut self) {
        self.handle = None;
        self.split = None;
        self.read_end = self.cp.resume.offset;
        self.recent = self.commit_tail.clone();
    }

    /// Bytes after the checkpoint that were seen but not delivered.
    fn undelivered(&self) -> u64 {
        self.cp.size.max(self.read_end).saturating_sub(self.cp.resume.offset)
    }
}

/// A directory entry matching the pattern, in one poll.
struct Entry {
    name: String,
    path: PathBuf,
    meta: Meta,
    claimed: bool,
    /// Opened and probed in this poll (at most once).
    opened: Option<Opened>,
    /// Whether opening failed in this poll (reported once).
    failed: bool,
    /// The generation this path or inode held before, if it was just replaced.
    previous: Option<(u64, GenerationCause)>,
}

/// An opened candidate file.
struct Opened {
    file: File,
    meta: Meta,
    probe: Probe,
}

/// Per-poll context: options, the read buffer, the sink, the directory's header and counters.
struct Ctx<'s> {
    opts: &'s TailOptions,
    buf: &'s mut Vec<u8>,
    sink: &'s mut dyn for<'a> FnMut(TailEvent<'a>),
    last_header: &'s mut Option<Vec<String>>,
    stats: PollStats,
    now: u64,
}

impl Ctx<'_> {
    fn notice(&mut self, t: &Tracked, notice: Notice) {
        (self.sink)(TailEvent::Notice { file: t.file_ref(), notice });
    }
}

/// The directory tailer (see the module docs).
#[derive(Debug)]
pub struct Tailer {
    dir: PathBuf,
    opts: TailOptions,
    next_id: u64,
    last_header: Option<Vec<String>>,
    /// Tracked generations, sorted by id.
    tracked: Vec<Tracked>,
    /// Candidates held back because they continue a live file: key → first seen.
    twins: HashMap<String, u64>,
    buf: Vec<u8>,
    /// Matching links refused at the last listing.
    refused: Vec<PathBuf>,
}

impl Tailer {
    /// A tailer of `dir`, resuming from `saved` if given. A state of another version, and any
    /// checkpoint that is internally inconsistent, is ignored with a warning: those files are
    /// read again from the start (duplicates rather than loss).
    pub fn new(dir: PathBuf, opts: TailOptions, saved: Option<TailState>) -> Tailer {
        let mut opts = opts;
        opts.max_record_bytes = opts.max_record_bytes.max(1);
        opts.read_chunk = opts.read_chunk.max(1);
        opts.fingerprint_bytes = opts.fingerprint_bytes.max(1);
        opts.marker_bytes = opts.marker_bytes.max(1);
        let mut state = saved.unwrap_or_default();
        if state.version != STATE_VERSION {
            tracing::warn!(
                dir = %dir.display(),
                version = state.version,
                expected = STATE_VERSION,
                "tail state of another version ignored: files are read again from the start"
            );
            state = TailState::default();
        }
        let mut files = std::mem::take(&mut state.files);
        files.sort_by_key(|f| f.id);
        files.dedup_by_key(|f| f.id);
        let mut tracked = Vec::new();
        for mut cp in files {
            if cp.header_hash.is_none() {
                cp.resume = Position::START;
                cp.data_start = 0;
                cp.fingerprint_len = 0;
                cp.fingerprint = fnv1a64(b"");
                cp.marker_len = 0;
                cp.marker = fnv1a64(b"");
            }
            let consistent = cp.id != 0
                && cp.resume.offset >= cp.data_start
                && cp.marker_len <= cp.resume.offset
                && cp.fingerprint_len <= cp.resume.offset - cp.data_start;
            if !consistent {
                tracing::warn!(dir = %dir.display(), name = %cp.name, "inconsistent checkpoint ignored");
                continue;
            }
            tracked.push(Tracked::from_checkpoint(cp, &dir));
        }
        let max_id = tracked.iter().map(|t| t.cp.id).max().unwrap_or(0);
        Tailer {
            buf: vec![0; opts.read_chunk],
            dir,
            opts,
            next_id: state.next_id.max(max_id + 1),
            last_header: state.last_header,
            tracked,
            twins: HashMap::new(),
            refused: Vec::new(),
        }
    }

    /// The directory being tailed.
    pub fn dir(&self) -> &Path {
        &self.dir
    }

    /// Snapshot for the checkpoint. Offsets are record boundaries of records already passed
    /// to the sink (or of rejected bytes), so saving this after the sink has made its records
    /// durable gives at-least-once delivery.
    pub fn state(&self) -> TailState {
        TailState {
            version: STATE_VERSION,
            next_id: self.next_id,
            last_header: self.last_header.clone(),
            files: self.tracked.iter().map(|t| t.cp.clone()).collect(),
        }
    }

    /// One reconcile pass: list the directory, match files to tracked generations, validate,
    /// read new complete records, seal quiet files.
    ///
    /// `now_ms` is a monotonic time from the caller, used only for quiet periods. Events go to
    /// `sink` in a deterministic order: files with open handles by generation id, then files
    /// matched to known generations by id, then new files by name, then sealing.
    ///
    /// # Errors
    /// Only when the directory cannot be listed; the state is then unchanged. Errors on single
    /// files are reported as [`Notice::Error`] and retried at the next poll.
    pub fn poll(&mut self, now_ms: u64, sink: &mut dyn FnMut(TailEvent<'_>)) -> Result<PollStats, TailError> {
        let (mut entries, refused) = self.list()?;
        self.refused = refused;
        let Tailer { dir: _, opts, next_id, last_header, tracked, twins, buf, refused } = self;
        let mut cx = Ctx { opts, buf, sink, last_header, stats: PollStats::default(), now: now_ms };
        for t in tracked.iter_mut() {
            t.present = false;
            t.detached = false;
        }
        phase_handles(tracked, &mut entries, &mut cx);
        phase_seek(tracked, &mut entries, &mut cx);
        phase_new(tracked, &mut entries, &mut cx, twins, next_id);
        phase_seal(tracked, &mut cx);
        for t in tracked.iter_mut() {
            t.cp.gone = !t.present;
        }
        let mut stats = cx.stats;
        stats.links_refused = refused.len();
        stats.files = tracked.len();
        stats.open = tracked.iter().filter(|t| t.handle.is_some()).count();
        Ok(stats)
    }

    /// Symbolic links in the directory that match the pattern but point outside it, refused at
    /// the last poll (see [`TailOptions::links_outside`]).
    pub fn refused_links(&self) -> &[PathBuf] {
        &self.refused
    }

    /// The matching entries of the directory, sorted by name, and the refused links.
    fn list(&self) -> Result<(Vec<Entry>, Vec<PathBuf>), TailError> {
        let err = |source| TailError::ListDir { dir: self.dir.clone(), source };
        let mut out = Vec::new();
        let mut refused = Vec::new();
        let canonical_dir = fs::canonicalize(&self.dir).unwrap_or_else(|_| self.dir.clone());
        for de in fs::read_dir(&self.dir).map_err(err)? {
            let de = de.map_err(err)?;
            let name = de.file_name().to_string_lossy().into_owned();
            if !crate::ingest::glob::name_matches(&self.opts.pattern, &name) {
                continue;
            }
            let path = de.path();
            // Follows symbolic links: a link is read as its target, if that is in the directory
            // (or links out of it are allowed).
            let Ok(m) = fs::metadata(&path) else { continue };
            if !m.is_file() {
                continue;
            }
            if !self.opts.links_outside && de.file_type().is_ok_and(|t| t.is_symlink()) {
                let inside = fs::canonicalize(&path)
                    .ok()
                    .and_then(|t| t.parent().map(|p| p == canonical_dir))
                    .unwrap_or(false);
                if !inside {
                    refused.push(path);
                    continue;
                }
            }
            out.push(Entry {
                name,
                path,
                meta: Meta::of(&m),
                claimed: false,
                opened: None,
                failed: false,
                previous: None,
            });
        }
        out.sort_by(|a, b| a.name.cmp(&b.name));
        // Symbolic links are followed and keyed by their target: a link and its target (or two
        // links to one file) are one file, read once, under the name of the real file where it
        // is listed, else under the first link name.
        let is_link = |e: &Entry| fs::symlink_metadata(&e.path).is_ok_and(|m| m.file_type().is_symlink());
        let mut keep = vec![true; out.len()];
        for i in 0..out.len() {
            let Some(id) = out[i].meta.id else { continue };
            if !keep[i] {
                continue;
            }
            for j in i + 1..out.len() {
                if keep[j] && out[j].meta.id == Some(id) {
                    if is_link(&out[i]) && !is_link(&out[j]) {
                        keep[i] = false;
                        break;
                    }
                    keep[j] = false;
                }
            }
        }
        let mut k = keep.into_iter();
        out.retain(|_| k.next().unwrap_or(true));
        Ok((out, refused))
    }
}

/// Whether entry `e` is the file described by `m` (by file id; by path where ids are unknown).
fn same_file(e: &Entry, id: Option<FileId>, path: &Path) -> bool {
    match (e.meta.id, id) {
        (Some(a), Some(b)) => a == b,
        _ => e.path == path,
    }
}

/// Phase 1: generations with open handles. Find their current name, check that their file
/// still continues what was read, and read what is new.
fn phase_handles(tracked: &mut [Tracked], entries: &mut [Entry], cx: &mut Ctx<'_>) {
    for t in tracked.iter_mut() {
        let Some(file) = t.handle.as_ref() else { continue };
        let m = match file.metadata() {
            Ok(m) => Meta::of(&m),
            Err(source) => {
                let error = TailError::File { op: "stat", path: t.path.clone(), source };
                cx.notice(t, Notice::Error(error));
                continue;
            }
        };
        let idx = entries.iter().position(|e| !e.claimed && same_file(e, m.id, &t.path));
        if let Some(i) = idx {
            entries[i].claimed = true;
            t.present = true;
            if entries[i].path != t.path {
                let from = std::mem::replace(&mut t.path, entries[i].path.clone());
                t.cp.name = entries[i].name.clone();
                cx.notice(t, Notice::Renamed { from });
            }
        }
        if !t.stale && m.size == t.cp.size && m.mtime_ns == t.cp.mtime_ns && m.id == t.cp.file_id {
            continue;
        }
        match refresh(t, m, cx) {
            Ok(true) => {}
            Ok(false) => {
                // The file no longer holds this generation: look for its content elsewhere.
                t.close();
                t.detached = true;
                t.present = false;
                if let Some(i) = idx {
                    entries[i].claimed = false;
                    entries[i].previous = Some((t.cp.id, GenerationCause::Truncated));
                }
            }
            Err(source) => {
                let error = TailError::File { op: "read", path: t.path.clone(), source };
                cx.notice(t, Notice::Error(error));
            }
        }
    }
}

/// Validate a generation against its own (changed) file and read it. `Ok(false)`: the file
/// no longer continues the generation.
fn refresh(t: &mut Tracked, m: Meta, cx: &mut Ctx<'_>) -> io::Result<bool> {
    let Some(file) = t.handle.as_ref() else { return Ok(true) };
    let pr = probe(file, cx.opts.max_record_bytes, &mut cx.stats)?;
    if t.cp.header_hash.is_none() {
        // Header pending: nothing was delivered, so any content is fine.
        if let Some(h) = pr.resolve(cx.last_header.as_deref()) {
            let file = file.try_clone()?;
            adopt_header(t, file, h, cx)?;
        } else {
            t.cp.size = m.size;
            t.cp.mtime_ns = m.mtime_ns;
            t.cp.file_id = m.id;
            return Ok(true);
        }
    } else {
        if check_content(&t.cp, file, m.size, &pr, cx.opts, &mut cx.stats)?.is_none() {
            return Ok(false);
        }
        // The checkpoint is valid. Bytes held after it (a partial row, at most
        // `max_record_bytes`) are parsed again: rows share long prefixes (timestamps), so
        // comparing a few bytes could not tell an append from a rewrite. Only the skipped part
        // of a too-long row, which is rejected anyway, is kept when its last bytes still match.
        if t.read_end > t.cp.resume.offset {
            let skipping =
                t.split.as_ref().and_then(Splitter::held).is_some_and(|h| h.kind == HeldKind::TooLong);
            let len = t.recent.len() as u64;
            let same = skipping
                && m.size >= t.read_end
                && read_span(file, t.read_end - len, len, &mut cx.stats)? == t.recent;
            if !same {
                t.rewind();
            }
        }
    }
    if m.size != t.cp.size {
        t.last_growth_ms = cx.now;
    }
    t.cp.file_id = m.id;
    t.cp.mtime_ns = m.mtime_ns;
    t.cp.size = m.size;
    read_to_end(t, cx)?;
    Ok(true)
}

/// A pending-header generation got its header: start reading at its data start.
fn adopt_header(t: &mut Tracked, file: File, h: HeaderInfo, cx: &mut Ctx<'_>) -> io::Result<()> {
    let ds = h.data_start;
    let m = (cx.opts.marker_bytes as u64).min(ds.offset);
    let tail = read_span(&file, ds.offset - m, m, &mut cx.stats)?;
    t.cp.header_hash = Some(h.hash);
    t.cp.inherited_header = h.inherited.then(|| h.fields.clone());
    t.cp.data_start = ds.offset;
    t.cp.resume = ds;
    t.cp.fingerprint_len = 0;
    t.cp.fingerprint = fnv1a64(b"");
    t.cp.marker_len = tail.len() as u64;
    t.cp.marker = fnv1a64(&tail);
    report_header_problems(t, &h, cx);
    if !h.inherited {
        if let Some(prev) = cx.last_header.as_ref().filter(|p| **p != h.fields) {
            let previous = prev.clone();
            cx.notice(t, Notice::HeaderChanged { previous });
        }
        *cx.last_header = Some(h.fields.clone());
    }
    t.attach(file, h, tail, Vec::new(), cx.opts);
    Ok(())
}

fn report_header_problems(t: &Tracked, h: &HeaderInfo, cx: &mut Ctx<'_>) {
    let reason = if h.too_long {
        RejectReason::TooLong { bytes: h.data_start.offset }
    } else if !h.utf8_ok {
        RejectReason::InvalidHeader
    } else {
        return;
    };
    cx.stats.rejected += 1;
    (cx.sink)(TailEvent::Rejected { file: t.file_ref(), line: 1, reason });
}

/// Read from `read_end` to the end of the file, delivering complete records, then update the
/// checkpoint, marker and fingerprint.
/// Forget what was read after the checkpoint: the splitter, the read position, the bytes kept
/// for the marker and the fingerprint prefix all go back to `cp.resume`.
fn rewind_to_checkpoint(
    cp: &FileCheckpoint,
    split: Option<&mut Splitter>,
    read_end: &mut u64,
    recent: &mut Vec<u8>,
    commit_tail: &[u8],
    prefix: &mut Vec<u8>,
) {
    let at = cp.resume;
    if let Some(s) = split {
        s.reset(at);
    }
    *read_end = at.offset;
    *recent = commit_tail.to_vec();
    prefix.truncate(usize::try_from(at.offset - cp.data_start).unwrap_or(usize::MAX));
}

fn read_to_end(t: &mut Tracked, cx: &mut Ctx<'_>) -> io::Result<()> {
    let Tracked {
        cp,
        path,
        fields,
        handle,
        split,
        read_end,
        recent,
        commit_tail,
        prefix,
        header_sent,
        stale,
        ..
    } = t;
    let (Some(file), Some(split)) = (handle.as_ref(), split.as_mut()) else { return Ok(()) };
    let file_ref = FileRef { path: path.as_path(), id: cp.id };
    let fields: &[String] = fields;
    let m = cx.opts.marker_bytes;
    let fp_end = cp.data_start + cx.opts.fingerprint_bytes as u64;
    let mut result = Ok(());
    loop {
        let n = match read_at(file, cx.buf, *read_end) {
            Ok(0) => break,
            Ok(n) => n,
            Err(e) => {
                *stale = true;
                result = Err(e);
                break;
            }
        };
        cx.stats.bytes_read += n as u64;
        let chunk = &cx.buf[..n];
        let chunk_off = *read_end;
        let before = split.position().offset;
        let stats = &mut cx.stats;
        let sink = &mut *cx.sink;
        split.feed(chunk, &mut |item| match item {
            Item::Record(r) if r.contains_nul() => {
                stats.rejected += 1;
                sink(TailEvent::Rejected { file: file_ref, line: r.line, reason: RejectReason::ContainsNul });
            }
            Item::Record(record) => {
                if !*header_sent {
                    *header_sent = true;
                    sink(TailEvent::Header { file: file_ref, fields });
                }
                stats.records += 1;
                sink(TailEvent::Record { file: file_ref, record });
            }
            Item::TooLong(s) => {
                stats.rejected += 1;
                let reason = RejectReason::TooLong { bytes: s.end - s.start };
                sink(TailEvent::Rejected { file: file_ref, line: s.line, reason });
            }
            Item::NulRun(s) => {
                stats.rejected += 1;
                let reason = RejectReason::NulRun { bytes: s.end - s.start };
                sink(TailEvent::Rejected { file: file_ref, line: s.line, reason });
            }
        });
        let after = split.position();
        // Fingerprint prefix: data bytes read so far, contiguous from the data start.
        let want_from = cp.data_start + prefix.len() as u64;
        if want_from < fp_end && want_from >= chunk_off && want_from < chunk_off + n as u64 {
            let a = usize::try_from(want_from - chunk_off).unwrap_or(n);
            let b = usize::try_from(fp_end.min(chunk_off + n as u64) - chunk_off).unwrap_or(n);
            prefix.extend_from_slice(&chunk[a..b]);
        }
        if after.offset != before {
            let upto = usize::try_from(after.offset - chunk_off).unwrap_or(n);
            *commit_tail = last_bytes(recent, &chunk[..upto], m);
        }
        *recent = last_bytes(recent, chunk, m);
        *read_end += n as u64;
        cp.resume = after;
    }
    if result.is_ok() {
        *stale = false;
    }
    // A NUL run at the end may be a preallocated region that the writer will fill: re-read it.
    if split.held().is_some_and(|h| h.kind == HeldKind::NulRun) {
        rewind_to_checkpoint(cp, Some(split), read_end, recent, commit_tail, prefix);
    }
    cp.size = cp.size.max(*read_end);
    cp.marker_len = commit_tail.len() as u64;
    cp.marker = fnv1a64(commit_tail);
    let committed = usize::try_from(cp.resume.offset - cp.data_start).unwrap_or(usize::MAX);
    let mut fp = prefix.len().min(committed);
    // Line breaks alone (the `\n` of a CRLF header, blank lines) are no content: a file with
    // nothing else after its header is still identified by its name.
    if prefix[..fp].iter().all(|&b| b == b'\n' || b == b'\r') {
        fp = 0;
    }
    cp.fingerprint_len = fp as u64;
    cp.fingerprint = fnv1a64(&prefix[..fp]);
    result
}

/// Open and probe an entry once per poll.
fn open_entry(e: &mut Entry, cx: &mut Ctx<'_>) -> bool {
    if e.opened.is_some() {
        return true;
    }
    if e.failed {
        return false;
    }
    let opened = File::open(&e.path).and_then(|file| {
        let meta = Meta::of(&file.metadata()?);
        let probe = probe(&file, cx.opts.max_record_bytes, &mut cx.stats)?;
        Ok(Opened { file, meta, probe })
    });
    match opened {
        Ok(o) => {
            e.opened = Some(o);
            true
        }
        Err(source) => {
            e.failed = true;
            let error = TailError::File { op: "open", path: e.path.clone(), source };
            (cx.sink)(TailEvent::Notice {
                file: FileRef { path: &e.path, id: 0 },
                notice: Notice::Error(error),
            });
            false
        }
    }
}

/// Phase 2: generations without a usable handle (loaded from a checkpoint, sealed, detached
/// in phase 1, or open on a file that left the directory) look for their content among the
/// unclaimed entries: same file id first, then same name, then the rest by name.
fn phase_seek(tracked: &mut Vec<Tracked>, entries: &mut [Entry], cx: &mut Ctx<'_>) {
    let mut i = 0;
    while i < tracked.len() {
        let t = &mut tracked[i];
        if t.handle.is_some() && t.present {
            i += 1;
            continue;
        }
        let found = seek(t, entries, cx);
        match found {
            Some((k, proof)) => {
                if let Err(source) = take_over(t, &mut entries[k], proof, cx) {
                    let error = TailError::File { op: "read", path: t.path.clone(), source };
                    cx.notice(t, Notice::Error(error));
                }
                i += 1;
            }
            None if t.handle.is_some() => {
                // Left the directory; keep reading the handle until sealed. If another file
                // took its name, that one is a new generation.
                for e in entries.iter_mut().filter(|e| !e.claimed && e.path == t.path) {
                    e.previous = Some((t.cp.id, GenerationCause::Replaced));
                }
                i += 1;
            }
            None => {
                let cause = if t.detached { EndCause::Overwritten } else { EndCause::Removed };
                let unread = t.undelivered();
                cx.notice(t, Notice::Ended { cause, unread_bytes: unread });
                if !t.detached {
                    for e in entries.iter_mut().filter(|e| !e.claimed && e.path == t.path) {
                        e.previous = Some((t.cp.id, GenerationCause::Replaced));
                    }
                }
                tracked.remove(i);
            }
        }
    }
}

/// Find the unclaimed entry holding `t`'s content, with what the content check read (none for
/// the fast path and for a generation whose header is pending).
fn seek(t: &Tracked, entries: &mut [Entry], cx: &mut Ctx<'_>) -> Option<(usize, Option<Proof>)> {
    // Unchanged sealed file under its name (entries are sorted by name): a stat is enough.
    if t.handle.is_none()
        && t.cp.sealed
        && t.validated
        && let Ok(k) = entries.binary_search_by(|e| e.name.as_str().cmp(&t.cp.name))
    {
        let e = &entries[k];
        if !e.claimed
            && e.meta.id.is_some()
            && e.meta.id == t.cp.file_id
            && e.meta.size == t.cp.size
            && e.meta.mtime_ns == t.cp.mtime_ns
        {
            return Some((k, None));
        }
    }
    let mut order: Vec<usize> = (0..entries.len()).filter(|&k| !entries[k].claimed).collect();
    order.sort_by_key(|&k| {
        let e = &entries[k];
        let by_id = e.meta.id.is_some() && e.meta.id == t.cp.file_id;
        (!by_id, e.path != t.path, k)
    });
    for k in order {
        let e = &mut entries[k];
        let same_path = e.path == t.path;
        // Without committed data, identity is the name (an inode number may have been reused
        // by a copy of another file), and only a generation that has no file may move.
        if t.cp.fingerprint_len == 0 && (!same_path || t.handle.is_some() || t.cp.gone) {
            continue;
        }
        if !open_entry(e, cx) {
            continue;
        }
        let Some(o) = e.opened.as_ref() else { continue };
        if t.cp.header_hash.is_none() {
            return Some((k, None));
        }
        match check_content(&t.cp, &o.file, o.meta.size, &o.probe, cx.opts, &mut cx.stats) {
            Ok(Some(proof)) => return Some((k, Some(proof))),
            Ok(None) => {}
            Err(source) => {
                let error = TailError::File { op: "read", path: e.path.clone(), source };
                cx.notice(t, Notice::Error(error));
            }
        }
    }
    None
}

/// `t` continues in entry `e` (which `seek` matched): claim it, open it, read it.
fn take_over(t: &mut Tracked, e: &mut Entry, proof: Option<Proof>, cx: &mut Ctx<'_>) -> io::Result<()> {
    e.claimed = true;
    t.present = true;
    let old_path = std::mem::replace(&mut t.path, e.path.clone());
    t.cp.name = e.name.clone();
    let Some(o) = e.opened.take() else {
        // Fast path: an unchanged sealed file.
        if old_path != t.path {
            cx.notice(t, Notice::Renamed { from: old_path });
        }
        return Ok(());
    };
    let had_handle = t.handle.is_some();
    let (was_sealed, was_validated, was_detached) = (t.cp.sealed, t.validated, t.detached);
    if t.cp.header_hash.is_none() {
        // Header still pending: follow the file; its header decides later.
        t.handle = Some(o.file);
        t.validated = true;
        t.cp.sealed = false;
        t.last_growth_ms = cx.now;
        let m = o.meta;
        t.cp.size = 0;
        return refresh(t, m, cx).map(|_| ());
    }
    let Some(proof) = proof else { return Ok(()) };
    if had_handle || was_detached {
        cx.notice(t, Notice::Continued { from: old_path });
    } else {
        if old_path != t.path {
            cx.notice(t, Notice::Renamed { from: old_path });
        }
        // A sealed file found unchanged (after a rename, or a restart) stays sealed.
        if was_sealed && o.meta.size == t.cp.size && o.meta.mtime_ns == t.cp.mtime_ns {
            t.validated = true;
            t.cp.file_id = o.meta.id;
            t.fields = proof.header.fields;
            return Ok(());
        }
        if !was_validated {
            cx.notice(t, Notice::Resumed { offset: t.cp.resume.offset });
        } else if was_sealed {
            cx.notice(t, Notice::Unsealed);
        }
    }
    t.attach(o.file, proof.header, proof.tail, proof.prefix, cx.opts);
    t.last_growth_ms = cx.now;
    t.cp.file_id = o.meta.id;
    t.cp.mtime_ns = o.meta.mtime_ns;
    t.cp.size = o.meta.size;
    read_to_end(t, cx)
}

/// Phase 3: unclaimed entries become new generations (by name), unless they continue a live
/// file (held back, see the module docs).
fn phase_new(
    tracked: &mut Vec<Tracked>,
    entries: &mut [Entry],
    cx: &mut Ctx<'_>,
    twins: &mut HashMap<String, u64>,
    next_id: &mut u64,
) {
    let mut still_twins = HashMap::new();
    for e in entries.iter_mut() {
        if e.claimed || !open_entry(e, cx) {
            continue;
        }
        let Some(o) = e.opened.as_ref() else { continue };
        // Does it continue a live file? (A copy taken before a truncation.)
        let mut twin = false;
        for t in tracked.iter().filter(|t| t.handle.is_some() && t.present && t.cp.fingerprint_len > 0) {
            if let Ok(Some(_)) = check_content(&t.cp, &o.file, o.meta.size, &o.probe, cx.opts, &mut cx.stats)
            {
                twin = true;
                break;
            }
        }
        if twin {
            let key = e.path.to_string_lossy().into_owned();
            let first = twins.get(&key).copied().unwrap_or(cx.now);
            if cx.now.saturating_sub(first) < cx.opts.seal_after_ms {
                tracing::debug!(path = %e.path.display(), "held back: continues a live file");
                still_twins.insert(key, first);
                continue;
            }
        }
        let Some(o) = e.opened.take() else { continue };
        let id = *next_id;
        *next_id += 1;
        let dir = e.path.parent().unwrap_or(Path::new(""));
        let mut t = Tracked::from_checkpoint(FileCheckpoint::fresh(id, e.name.clone(), o.meta.id), dir);
        t.present = true;
        t.validated = true;
        t.last_growth_ms = cx.now;
        let notice = match e.previous {
            Some((previous, cause)) => Notice::NewGeneration { previous, cause },
            None => Notice::Discovered,
        };
        cx.notice(&t, notice);
        let header = o.probe.resolve(cx.last_header.as_deref());
        let result = match header {
            Some(h) => adopt_header(&mut t, o.file, h, cx).and_then(|()| {
                t.cp.file_id = o.meta.id;
                t.cp.size = o.meta.size;
                t.cp.mtime_ns = o.meta.mtime_ns;
                read_to_end(&mut t, cx)
            }),
            None => {
                // No complete header yet: follow the file by name until it has one.
                t.handle = Some(o.file);
                t.cp.size = o.meta.size;
                t.cp.mtime_ns = o.meta.mtime_ns;
                Ok(())
            }
        };
        if let Err(source) = result {
            let error = TailError::File { op: "read", path: t.path.clone(), source };
            cx.notice(&t, Notice::Error(error));
        }
        e.claimed = true;
        tracked.push(t);
    }
    *twins = still_twins;
}

/// Phase 4: seal quiet files that left the directory (and forget them) or have a newer
/// sibling (and close them).
fn phase_seal(tracked: &mut Vec<Tracked>, cx: &mut Ctx<'_>) {
    let newest_present = tracked.iter().filter(|t| t.present).map(|t| t.cp.id).max().unwrap_or(0);
    let mut i = 0;
    while i < tracked.len() {
        let t = &mut tracked[i];
        let quiet = cx.now.saturating_sub(t.last_growth_ms) >= cx.opts.seal_after_ms;
        if t.handle.is_none() || !quiet || (t.present && t.cp.id >= newest_present) {
            i += 1;
            continue;
        }
        let fragment = seal(t, cx);
        if t.present {
            cx.notice(t, Notice::Sealed { fragment_bytes: fragment });
            i += 1;
        } else {
            cx.notice(t, Notice::Ended { cause: EndCause::Removed, unread_bytes: fragment });
            tracked.remove(i);
        }
    }
}

/// Close a generation, rejecting an unterminated fragment. Returns its size.
fn seal(t: &mut Tracked, cx: &mut Ctx<'_>) -> u64 {
    let fragment = t.undelivered();
    if fragment > 0 && t.cp.header_hash.is_some() {
        let reason = match t.split.as_ref().and_then(Splitter::held).map(|h| h.kind) {
            Some(HeldKind::TooLong) => RejectReason::TooLong { bytes: fragment },
            Some(HeldKind::Record) => RejectReason::Unterminated { bytes: fragment },
            Some(HeldKind::NulRun) | None => RejectReason::NulRun { bytes: fragment },
        };
        cx.stats.rejected += 1;
        (cx.sink)(TailEvent::Rejected { file: t.file_ref(), line: t.cp.resume.line, reason });
    }
    t.close();
    t.cp.sealed = true;
    fragment
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;
    use std::fs::OpenOptions;
    use std::io::Write;

    const HEADER: &str = "Time,Tag,Id,Value\n";

    /// An owned copy of an event.
    #[derive(Clone, Debug, PartialEq)]
    enum Ev {
        Header(u64, Vec<String>),
        Rec(u64, String),
        Rej(u64, u64, RejectReason),
        Note(u64, String),
    }

    fn row(i: u32) -> String {
        format!("2026-12-01T00:{:02}:{:02}Z,FI-2011,row-{i:06},{i}.5\n", i / 60 % 60, i % 60)
    }

    fn rows(r: std::ops::Range<u32>) -> String {
        r.map(row).collect()
    }

    fn opts() -> TailOptions {
        TailOptions {
            pattern: "plant_*.csv".into(),
            max_record_bytes: 256,
            fingerprint_bytes: 100,
            marker_bytes: 16,
            seal_after_ms: 1000,
            read_chunk: 7,
            links_outside: false,
        }
    }

    struct Fixture {
        dir: tempfile::TempDir,
        tailer: Tailer,
        now: u64,
    }

    impl Fixture {
        fn new() -> Fixture {
            Self::with(opts())
        }

        fn with(o: TailOptions) -> Fixture {
            let dir = tempfile::tempdir().unwrap();
            let tailer = Tailer::new(dir.path().to_path_buf(), o, None);
            Fixture { dir, tailer, now: 0 }
        }

        fn path(&self, name: &str) -> PathBuf {
            self.dir.path().join(name)
        }

        fn write(&self, name: &str, text: &str) {
            fs::write(self.path(name), text).unwrap();
        }

        fn append(&self, name: &str, text: &str) {
            let mut f = OpenOptions::new().append(true).create(true).open(self.path(name)).unwrap();
            f.write_all(text.as_bytes()).unwrap();
        }

        /// Write to a temp name (outside the pattern), then rename over `name`.
        fn replace(&self, name: &str, text: &str) {
            self.write(".tmp-export", text);
            fs::rename(self.path(".tmp-export"), self.path(name)).unwrap();
        }

        /// Truncate `name` in place (same inode), as a copy-truncate rotation does.
        fn truncate(&self, name: &str) {
            OpenOptions::new().write(true).open(self.path(name)).unwrap().set_len(0).unwrap();
        }

        fn rename(&self, from: &str, to: &str) {
            fs::rename(self.path(from), self.path(to)).unwrap();
        }

        fn restart(&mut self) {
            let json = serde_json::to_string(&self.tailer.state()).unwrap();
            let state: TailState = serde_json::from_str(&json).unwrap();
            self.tailer = Tailer::new(self.dir.path().to_path_buf(), self.tailer.opts.clone(), Some(state));
        }

        /// Poll after `advance_ms`, check the checkpoints, return the events.
        fn poll_after(&mut self, advance_ms: u64) -> Vec<Ev> {
            self.now += advance_ms;
            let mut evs = Vec::new();
            self.tailer
                .poll(self.now, &mut |e| {
                    evs.push(match e {
                        TailEvent::Header { file, fields } => Ev::Header(file.id, fields.to_vec()),
                        TailEvent::Record { file, record } => {
                            let f: Vec<String> =
                                record.iter().map(|b| String::from_utf8_lossy(b).into_owned()).collect();
                            Ev::Rec(file.id, f.join(","))
                        }
                        TailEvent::Rejected { file, line, reason } => Ev::Rej(file.id, line, reason),
                        TailEvent::Notice { file, notice } => Ev::Note(file.id, short(&notice)),
                    })
                })
                .unwrap();
            check_boundaries(self.dir.path(), &self.tailer.state());
            evs
        }

        fn poll(&mut self) -> Vec<Ev> {
            self.poll_after(10)
        }
    }

    fn short(n: &Notice) -> String {
        match n {
            Notice::Discovered => "Discovered".into(),
            Notice::NewGeneration { cause, .. } => format!("NewGeneration({cause:?})"),
            Notice::Resumed { .. } => "Resumed".into(),
            Notice::Renamed { .. } => "Renamed".into(),
            Notice::Continued { .. } => "Continued".into(),
            Notice::HeaderChanged { .. } => "HeaderChanged".into(),
            Notice::Sealed { fragment_bytes } => format!("Sealed({fragment_bytes})"),
            Notice::Unsealed => "Unsealed".into(),
            Notice::Ended { cause, unread_bytes } => format!("Ended({cause:?},{unread_bytes})"),
            Notice::Error(e) => format!("Error({e})"),
        }
    }

    /// Every checkpoint whose file still holds its content is a record boundary: a fresh
    /// splitter started there reproduces the records of a whole-file parse after it.
    fn check_boundaries(dir: &Path, state: &TailState) {
        for cp in &state.files {
            let Ok(bytes) = fs::read(dir.join(&cp.name)) else { continue };
            let at = usize::try_from(cp.resume.offset).unwrap();
            if cp.header_hash.is_none() || bytes.len() < at {
                continue;
            }
            let ml = usize::try_from(cp.marker_len).unwrap();
            if fnv1a64(&bytes[at - ml..at]) != cp.marker {
                continue;
            }
            let collect = |from: Position| {
                let mut s = Splitter::new(1 << 20);
                s.reset(from);
                let mut v = Vec::new();
                s.feed(&bytes[usize::try_from(from.offset).unwrap()..], &mut |it| {
                    if let Item::Record(r) = it {
                        v.push((r.start, r.end, r.line, r.iter().map(<[u8]>::to_vec).collect::<Vec<_>>()));
                    }
                });
                v
            };
            let whole: Vec<_> =
                collect(Position::START).into_iter().filter(|r| r.0 >= cp.resume.offset).collect();
            assert_eq!(
                collect(cp.resume),
                whole,
                "checkpoint {:?} of {} is not a boundary",
                cp.resume,
                cp.name
            );
        }
    }

    /// The data records delivered, as `file id: row` strings (headers and notices dropped).
    fn recs(evs: &[Ev]) -> Vec<String> {
        evs.iter()
            .filter_map(|e| match e {
                Ev::Rec(id, r) => Some(format!("{id}:{r}")),
                _ => None,
            })
            .collect()
    }

    fn notes(evs: &[Ev]) -> Vec<String> {
        evs.iter()
            .filter_map(|e| match e {
                Ev::Note(id, n) => Some(format!("{id}:{n}")),
                _ => None,
            })
            .collect()
    }

    /// Expected record strings for rows `r` of file `id`.
    fn want(id: u64, r: std::ops::Range<u32>) -> Vec<String> {
        r.map(|i| format!("{id}:{}", row(i).trim_end())).collect()
    }

    fn cat(parts: &[Vec<String>]) -> Vec<String> {
        parts.concat()
    }

    #[test]
    fn appends_are_delivered_once_in_order_after_the_header() {
        let mut fx = Fixture::new();
        fx.write("plant_a.csv", &format!("{HEADER}{}", rows(0..3)));
        let evs = fx.poll();
        assert_eq!(evs[0], Ev::Note(1, "Discovered".into()));
        assert_eq!(evs[1], Ev::Header(1, vec!["Time".into(), "Tag".into(), "Id".into(), "Value".into()]));
        assert_eq!(recs(&evs), want(1, 0..3));
        fx.append("plant_a.csv", &rows(3..5));
        let evs = fx.poll();
        // The header is sent once per open, not per poll.
        assert!(!evs.iter().any(|e| matches!(e, Ev::Header(..))), "{evs:?}");
        assert_eq!(recs(&evs), want(1, 3..5));
        // Unchanged: a stat, no read.
        let mut stats = PollStats::default();
        let _ = fx.tailer.poll(fx.now, &mut |_| {}).map(|s| stats = s);
        assert_eq!((stats.bytes_read, stats.records, stats.files, stats.open), (0, 0, 1, 1));
    }

    #[test]
    fn partial_row_is_held_until_completed() {
        let mut fx = Fixture::new();
        let r3 = row(3);
        fx.write("plant_a.csv", &format!("{HEADER}{}{}", rows(0..3), &r3[..20]));
        assert_eq!(recs(&fx.poll()), want(1, 0..3));
        assert_eq!(fx.tailer.state().files[0].resume.offset as usize, HEADER.len() + rows(0..3).len());
        fx.append("plant_a.csv", &r3[20..30]);
        assert_eq!(recs(&fx.poll()), Vec::<String>::new());
        fx.append("plant_a.csv", &r3[30..]);
        assert_eq!(recs(&fx.poll()), want(1, 3..4));
    }

    #[test]
    fn partial_row_across_a_restart_is_delivered_once_and_whole() {
        let mut fx = Fixture::new();
        let r3 = row(3);
        fx.write("plant_a.csv", &format!("{HEADER}{}{}", rows(0..3), &r3[..25]));
        assert_eq!(recs(&fx.poll()), want(1, 0..3));
        fx.restart();
        fx.append("plant_a.csv", &format!("{}{}", &r3[25..], row(4)));
        let evs = fx.poll();
        assert_eq!(notes(&evs), vec!["1:Resumed"]);
        assert_eq!(recs(&evs), want(1, 3..5));
        // Restart again with nothing new: nothing delivered.
        fx.restart();
        assert_eq!(recs(&fx.poll()), Vec::<String>::new());
    }

    #[test]
    fn daily_rotation_keeps_tailing_the_old_file_until_sealed() {
        let mut fx = Fixture::new();
        fx.write("plant_20261201.csv", &format!("{HEADER}{}", rows(0..2)));
        assert_eq!(recs(&fx.poll()), want(1, 0..2));
        fx.write("plant_20261202.csv", &format!("{HEADER}{}", rows(100..101)));
        // A late row in yesterday's file is still read.
        fx.append("plant_20261201.csv", &row(2));
        let evs = fx.poll();
        assert_eq!(recs(&evs), cat(&[want(1, 2..3), want(2, 100..101)]));
        // Quiet for the seal time with a newer sibling: sealed and closed; the newest stays open.
        let evs = fx.poll_after(1000);
        assert_eq!(notes(&evs), vec!["1:Sealed(0)"]);
        let st = fx.tailer.state();
        assert!(st.files[0].sealed && !st.files[1].sealed);
        // A sealed file that changes is unsealed and read on.
        fx.append("plant_20261201.csv", &row(3));
        let evs = fx.poll();
        assert_eq!(notes(&evs), vec!["1:Unsealed"]);
        assert_eq!(recs(&evs), want(1, 3..4));
        // Sealed files are remembered across a restart without re-reading.
        let evs = fx.poll_after(1000);
        assert_eq!(notes(&evs), vec!["1:Sealed(0)"]);
        fx.restart();
        let evs = fx.poll();
        assert_eq!(recs(&evs), Vec::<String>::new());
        assert_eq!(notes(&evs), vec!["2:Resumed"]);
        assert!(fx.tailer.state().files[0].sealed);
    }

    #[test]
    fn sealed_file_renamed_stays_sealed_and_is_not_read_again() {
        let mut fx = Fixture::new();
        fx.write("plant_1.csv", &format!("{HEADER}{}", rows(0..2)));
        fx.write("plant_2.csv", HEADER);
        fx.poll();
        assert_eq!(notes(&fx.poll_after(1000)), vec!["1:Sealed(0)"]);
        fx.rename("plant_1.csv", "plant_1_archived.csv");
        let evs = fx.poll();
        assert_eq!(notes(&evs), vec!["1:Renamed"]);
        assert_eq!(recs(&evs), Vec::<String>::new());
        assert!(fx.tailer.state().files[0].sealed);
    }

    #[test]
    fn rotation_by_rename_continues_without_rereading() {
        let mut fx = Fixture::new();
        fx.write("plant_current.csv", &format!("{HEADER}{}", rows(0..2)));
        assert_eq!(recs(&fx.poll()), want(1, 0..2));
        fx.append("plant_current.csv", &row(2));
        fx.rename("plant_current.csv", "plant_20261201.csv");
        fx.write("plant_current.csv", &format!("{HEADER}{}", rows(3..4)));
        let evs = fx.poll();
        assert_eq!(notes(&evs), vec!["1:Renamed", "2:Discovered"]);
        assert_eq!(recs(&evs), cat(&[want(1, 2..3), want(2, 3..4)]));
    }

    #[test]
    fn several_rotations_between_polls_lose_nothing() {
        let mut fx = Fixture::new();
        fx.write("plant_current.csv", &format!("{HEADER}{}", rows(0..1)));
        assert_eq!(recs(&fx.poll()), want(1, 0..1));
        fx.append("plant_current.csv", &row(1));
        fx.rename("plant_current.csv", "plant_r1.csv");
        fx.write("plant_current.csv", &format!("{HEADER}{}", rows(2..4)));
        fx.rename("plant_current.csv", "plant_r2.csv");
        fx.write("plant_current.csv", &format!("{HEADER}{}", rows(4..5)));
        fx.rename("plant_current.csv", "plant_r3.csv");
        fx.write("plant_current.csv", HEADER);
        let evs = fx.poll();
        // The first file continues under its new name; new files get ids in name order:
        // plant_current (2, header only), plant_r2 (3), plant_r3 (4).
        assert_eq!(notes(&evs), vec!["1:Renamed", "2:Discovered", "3:Discovered", "4:Discovered"]);
        assert_eq!(recs(&evs), cat(&[want(1, 1..2), want(3, 2..4), want(4, 4..5)]));
    }

    #[test]
    fn copy_truncate_reads_the_gap_from_the_copy_without_duplicates() {
        let mut fx = Fixture::new();
        fx.write("plant_x.csv", &format!("{HEADER}{}", rows(0..3)));
        assert_eq!(recs(&fx.poll()), want(1, 0..3));
        fx.append("plant_x.csv", &rows(3..5));
        fs::copy(fx.path("plant_x.csv"), fx.path("plant_x_20261201.csv")).unwrap();
        fx.truncate("plant_x.csv");
        fx.append("plant_x.csv", &format!("{HEADER}{}", rows(5..6)));
        let evs = fx.poll();
        assert_eq!(notes(&evs), vec!["1:Continued", "2:NewGeneration(Truncated)"]);
        assert_eq!(recs(&evs), cat(&[want(1, 3..5), want(2, 5..6)]));
    }

    #[test]
    fn copy_seen_before_the_truncation_is_held_back_then_continues() {
        let mut fx = Fixture::new();
        fx.write("plant_x.csv", &format!("{HEADER}{}", rows(0..3)));
        assert_eq!(recs(&fx.poll()), want(1, 0..3));
        fx.append("plant_x.csv", &rows(3..5));
        fs::copy(fx.path("plant_x.csv"), fx.path("plant_x_20261201.csv")).unwrap();
        // Poll between the copy and the truncation: the copy is not read as a new file.
        assert_eq!(recs(&fx.poll()), want(1, 3..5));
        fx.truncate("plant_x.csv");
        fx.append("plant_x.csv", &format!("{HEADER}{}", rows(5..6)));
        let evs = fx.poll();
        assert_eq!(notes(&evs), vec!["1:Continued", "2:NewGeneration(Truncated)"]);
        assert_eq!(recs(&evs), want(2, 5..6));
    }

    #[test]
    fn distinct_files_sharing_their_first_rows_are_both_read_after_the_hold() {
        let mut fx = Fixture::new();
        fx.write("plant_a.csv", &format!("{HEADER}{}", rows(0..3)));
        assert_eq!(recs(&fx.poll()), want(1, 0..3));
        fx.write("plant_b.csv", &format!("{HEADER}{}{}", rows(0..3), row(50)));
        assert_eq!(recs(&fx.poll()), Vec::<String>::new());
        let evs = fx.poll_after(1000);
        assert_eq!(recs(&evs), cat(&[want(2, 0..3), want(2, 50..51)]));
    }

    #[test]
    fn truncation_to_a_shorter_file_is_a_new_generation() {
        let mut fx = Fixture::new();
        fx.write("plant_x.csv", &format!("{HEADER}{}", rows(0..5)));
        assert_eq!(recs(&fx.poll()), want(1, 0..5));
        fx.truncate("plant_x.csv");
        fx.append("plant_x.csv", HEADER);
        let evs = fx.poll();
        assert_eq!(notes(&evs), vec!["1:Ended(Overwritten,0)", "2:NewGeneration(Truncated)"]);
        fx.append("plant_x.csv", &row(10));
        assert_eq!(recs(&fx.poll()), want(2, 10..11));
    }

    #[test]
    fn truncate_and_refill_past_the_old_offset_is_caught_by_the_marker() {
        let mut fx = Fixture::new();
        fx.write("plant_x.csv", &format!("{HEADER}{}", rows(0..3)));
        assert_eq!(recs(&fx.poll()), want(1, 0..3));
        // Same inode, longer, different content.
        fx.truncate("plant_x.csv");
        fx.append("plant_x.csv", &format!("{HEADER}{}", rows(10..15)));
        let evs = fx.poll();
        assert_eq!(notes(&evs), vec!["1:Ended(Overwritten,0)", "2:NewGeneration(Truncated)"]);
        assert_eq!(recs(&evs), want(2, 10..15));
    }

    #[test]
    fn atomic_replace_with_a_superset_delivers_only_new_rows() {
        let mut fx = Fixture::new();
        let r3 = row(3);
        fx.write("plant_x.csv", &format!("{HEADER}{}{}", rows(0..3), &r3[..10]));
        assert_eq!(recs(&fx.poll()), want(1, 0..3));
        fx.replace("plant_x.csv", &format!("{HEADER}{}", rows(0..6)));
        let evs = fx.poll();
        assert_eq!(notes(&evs), vec!["1:Continued"]);
        assert_eq!(recs(&evs), want(1, 3..6));
        // Also across a restart.
        fx.restart();
        fx.replace("plant_x.csv", &format!("{HEADER}{}", rows(0..7)));
        let evs = fx.poll();
        assert_eq!(recs(&evs), want(1, 6..7));
    }

    #[test]
    fn atomic_replace_with_different_content_is_read_again() {
        let mut fx = Fixture::new();
        fx.write("plant_x.csv", &format!("{HEADER}{}", rows(0..3)));
        assert_eq!(recs(&fx.poll()), want(1, 0..3));
        // A re-export: row 1 corrected away, rows 2.. repeated, new rows.
        let text = format!("{HEADER}{}{}", row(0).replace(".5", ".7"), rows(2..5));
        fx.replace("plant_x.csv", &text);
        let evs = fx.poll();
        assert_eq!(notes(&evs), vec!["2:NewGeneration(Replaced)"]);
        assert_eq!(
            recs(&evs),
            cat(&[vec![format!("2:{}", row(0).replace(".5", ".7").trim_end())], want(2, 2..5)])
        );
        // The old generation is dropped once quiet.
        let evs = fx.poll_after(1000);
        assert_eq!(notes(&evs), vec!["1:Ended(Removed,0)"]);
    }

    #[test]
    fn deleted_file_is_read_to_its_end_through_the_handle() {
        let mut fx = Fixture::new();
        fx.write("plant_x.csv", &format!("{HEADER}{}", rows(0..2)));
        assert_eq!(recs(&fx.poll()), want(1, 0..2));
        // A writer still holding it appends after the unlink.
        let mut w = OpenOptions::new().append(true).open(fx.path("plant_x.csv")).unwrap();
        fs::remove_file(fx.path("plant_x.csv")).unwrap();
        w.write_all(row(2).as_bytes()).unwrap();
        assert_eq!(recs(&fx.poll()), want(1, 2..3));
        w.write_all(row(3).as_bytes()).unwrap();
        drop(w);
        assert_eq!(recs(&fx.poll()), want(1, 3..4));
        let evs = fx.poll_after(1000);
        assert_eq!(notes(&evs), vec!["1:Ended(Removed,0)"]);
        assert_eq!(fx.tailer.state().files, vec![]);
    }

    #[test]
    fn file_deleted_while_down_reports_unread_bytes() {
        let mut fx = Fixture::new();
        let r2 = row(2);
        fx.write("plant_x.csv", &format!("{HEADER}{}{}", rows(0..2), &r2[..9]));
        assert_eq!(recs(&fx.poll()), want(1, 0..2));
        let state = fx.tailer.state();
        fs::remove_file(fx.path("plant_x.csv")).unwrap();
        fx.tailer = Tailer::new(fx.dir.path().to_path_buf(), opts(), Some(state));
        let evs = fx.poll();
        assert_eq!(notes(&evs), vec!["1:Ended(Removed,9)"]);
    }

    #[test]
    fn delete_and_recreate_with_the_same_name_is_a_new_generation() {
        let mut fx = Fixture::new();
        fx.write("plant_x.csv", &format!("{HEADER}{}", rows(0..3)));
        assert_eq!(recs(&fx.poll()), want(1, 0..3));
        fs::remove_file(fx.path("plant_x.csv")).unwrap();
        fx.write("plant_x.csv", &format!("{HEADER}{}", rows(7..8)));
        let evs = fx.poll();
        assert_eq!(notes(&evs), vec!["2:NewGeneration(Replaced)"]);
        assert_eq!(recs(&evs), want(2, 7..8));
        // Same while down (the inode may well be reused): content decides.
        let state = fx.tailer.state();
        drop(std::mem::replace(&mut fx.tailer, Tailer::new(PathBuf::new(), opts(), None)));
        fs::remove_file(fx.path("plant_x.csv")).unwrap();
        fx.write("plant_x.csv", &format!("{HEADER}{}", rows(20..22)));
        fx.tailer = Tailer::new(fx.dir.path().to_path_buf(), opts(), Some(state));
        let evs = fx.poll();
        assert!(notes(&evs).contains(&"3:NewGeneration(Replaced)".to_owned()), "{evs:?}");
        assert!(recs(&evs).ends_with(&want(3, 20..22)));
    }

    #[test]
    fn files_created_while_down_are_read_from_the_start_in_name_order() {
        let mut fx = Fixture::new();
        fx.write("plant_20261201.csv", &format!("{HEADER}{}", rows(0..2)));
        assert_eq!(recs(&fx.poll()), want(1, 0..2));
        let state = fx.tailer.state();
        fx.append("plant_20261201.csv", &row(2));
        fx.write("plant_20261203.csv", &format!("{HEADER}{}", rows(40..41)));
        fx.write("plant_20261202.csv", &format!("{HEADER}{}", rows(20..22)));
        fx.tailer = Tailer::new(fx.dir.path().to_path_buf(), opts(), Some(state));
        let evs = fx.poll();
        assert_eq!(recs(&evs), cat(&[want(1, 2..3), want(2, 20..22), want(3, 40..41)]));
        assert_eq!(notes(&evs), vec!["1:Resumed", "2:Discovered", "3:Discovered"]);
    }

    #[test]
    fn header_change_is_noticed() {
        let mut fx = Fixture::new();
        fx.write("plant_1.csv", &format!("{HEADER}{}", rows(0..1)));
        fx.poll();
        fx.write("plant_2.csv", "Time,Tag,Id,Value,TI-2050\n");
        let evs = fx.poll();
        assert_eq!(notes(&evs), vec!["2:Discovered", "2:HeaderChanged"]);
    }

    #[test]
    fn bom_and_crlf_are_handled_including_a_stop_between_cr_and_lf() {
        let mut fx = Fixture::new();
        let crlf = |s: String| s.replace('\n', "\r\n");
        fx.write("plant_x.csv", &format!("\u{feff}{}{}", crlf(HEADER.into()), crlf(rows(0..2))));
        let r2 = crlf(row(2));
        fx.append("plant_x.csv", &r2[..r2.len() - 1]);
        let evs = fx.poll();
        assert_eq!(evs[1], Ev::Header(1, vec!["Time".into(), "Tag".into(), "Id".into(), "Value".into()]));
        // The \r completes the row; the \n arrives later and is skipped.
        assert_eq!(recs(&evs), want(1, 0..3));
        assert!(fx.tailer.state().files[0].resume.after_cr);
        fx.restart();
        fx.append("plant_x.csv", &format!("\n{}", crlf(row(3))));
        assert_eq!(recs(&fx.poll()), want(1, 3..4));
        assert_eq!(fx.tailer.state().files[0].resume.line, 6);
    }

    #[test]
    fn long_lines_are_rejected_and_reading_resynchronises() {
        let mut fx = Fixture::new();
        let long = format!("2026-12-01T00:00:09Z,FI-2011,row-x,{}\n", "9".repeat(600));
        fx.write("plant_x.csv", &format!("{HEADER}{}{long}{}", row(0), row(1)));
        let evs = fx.poll();
        assert_eq!(recs(&evs), cat(&[want(1, 0..1), want(1, 1..2)]));
        assert!(evs.contains(&Ev::Rej(1, 3, RejectReason::TooLong { bytes: long.len() as u64 })), "{evs:?}");
    }

    #[test]
    fn quoted_fields_with_newlines_are_one_record() {
        let mut fx = Fixture::new();
        fx.write("plant_x.csv", &format!("{HEADER}2026-12-01T00:00:00Z,FI-2011,\"note,\nsecond line\",1\n"));
        let text = "2026-12-01T00:00:01Z,TI-2050,\"open\nstill open";
        fx.append("plant_x.csv", text);
        let evs = fx.poll();
        assert_eq!(recs(&evs), vec!["1:2026-12-01T00:00:00Z,FI-2011,note,\nsecond line,1"]);
        fx.append("plant_x.csv", "\",2\n");
        assert_eq!(recs(&fx.poll()), vec!["1:2026-12-01T00:00:01Z,TI-2050,open\nstill open,2"]);
    }

    #[test]
    #[cfg(unix)]
    fn copy_truncate_with_a_writer_that_does_not_append_leaves_a_nul_hole() {
        let mut fx = Fixture::new();
        fx.write("plant_x.csv", &format!("{HEADER}{}", rows(0..3)));
        assert_eq!(recs(&fx.poll()), want(1, 0..3));
        let len = fs::metadata(fx.path("plant_x.csv")).unwrap().len();
        fs::copy(fx.path("plant_x.csv"), fx.path("plant_x_old.csv")).unwrap();
        let f = OpenOptions::new().write(true).open(fx.path("plant_x.csv")).unwrap();
        f.set_len(0).unwrap();
        // The writer keeps writing at its old offset, without a header.
        std::os::unix::fs::FileExt::write_at(&f, rows(3..5).as_bytes(), len).unwrap();
        drop(f);
        let evs = fx.poll();
        assert_eq!(recs(&evs), want(2, 3..5));
        assert!(evs.contains(&Ev::Rej(2, 1, RejectReason::NulRun { bytes: len })), "{evs:?}");
        assert!(!evs.iter().any(|e| matches!(e, Ev::Note(_, n) if n == "HeaderChanged")));
        assert_eq!(fx.tailer.state().files[1].inherited_header.as_ref().map(Vec::len), Some(4));
        // And across a restart.
        fx.restart();
        fx.append("plant_x.csv", &row(5));
        assert_eq!(recs(&fx.poll()), want(2, 5..6));
    }

    #[test]
    #[cfg(unix)]
    fn trailing_nul_region_is_not_trusted_and_read_again_when_filled() {
        let mut fx = Fixture::new();
        fx.write("plant_x.csv", &format!("{HEADER}{}", rows(0..1)));
        fx.append("plant_x.csv", &"\0".repeat(64));
        assert_eq!(recs(&fx.poll()), want(1, 0..1));
        // The preallocated region is overwritten in place with a row.
        let f = OpenOptions::new().write(true).open(fx.path("plant_x.csv")).unwrap();
        std::os::unix::fs::FileExt::write_at(&f, row(1).as_bytes(), (HEADER.len() + row(0).len()) as u64)
            .unwrap();
        drop(f);
        assert_eq!(recs(&fx.poll()), want(1, 1..2));
        // The fingerprint kept no NULs: the next row continues the same file.
        fx.append("plant_x.csv", &row(2));
        assert_eq!(recs(&fx.poll()), want(1, 2..3));
    }

    #[test]
    fn temp_files_outside_the_pattern_are_ignored() {
        let mut fx = Fixture::new();
        fx.write("plant_x.csv.tmp", &format!("{HEADER}{}", rows(0..1)));
        fx.write(".plant_x.csv", &format!("{HEADER}{}", rows(0..1)));
        fx.write("other.csv", &format!("{HEADER}{}", rows(0..1)));
        assert_eq!(fx.poll(), vec![]);
    }

    #[test]
    fn file_renamed_out_of_the_pattern_is_read_to_its_end_then_closed() {
        let mut fx = Fixture::new();
        fx.write("plant_x.csv", &format!("{HEADER}{}", rows(0..1)));
        assert_eq!(recs(&fx.poll()), want(1, 0..1));
        fx.append("plant_x.csv", &row(1));
        fx.rename("plant_x.csv", "plant_x.csv.1");
        fx.append("plant_x.csv.1", &row(2));
        assert_eq!(recs(&fx.poll()), want(1, 1..3));
        let evs = fx.poll_after(1000);
        assert_eq!(notes(&evs), vec!["1:Ended(Removed,0)"]);
        assert_eq!(fx.tailer.state().files.len(), 0);
    }

    #[test]
    fn a_symlink_and_its_target_are_read_once() {
        let mut fx = Fixture::new();
        fx.write("plant_b.csv", &format!("{HEADER}{}", rows(0..2)));
        std::os::unix::fs::symlink(fx.path("plant_b.csv"), fx.path("plant_a_latest.csv")).unwrap();
        assert_eq!(recs(&fx.poll()), want(1, 0..2));
        fx.append("plant_b.csv", &rows(2..4));
        assert_eq!(recs(&fx.poll()), want(1, 2..4));
        assert_eq!(fx.tailer.state().files.len(), 1);
        assert_eq!(fx.tailer.state().files[0].name, "plant_b.csv");
        // Re-pointing the link at a new file does not re-read either file.
        fx.write("plant_c.csv", &format!("{HEADER}{}", rows(10..11)));
        fs::remove_file(fx.path("plant_a_latest.csv")).unwrap();
        std::os::unix::fs::symlink(fx.path("plant_c.csv"), fx.path("plant_a_latest.csv")).unwrap();
        assert_eq!(recs(&fx.poll()), want(2, 10..11));
    }

    #[test]
    fn a_symlink_out_of_the_directory_is_refused_unless_allowed() {
        let mut fx = Fixture::new();
        let other = tempfile::tempdir().unwrap();
        let target = other.path().join("export.csv");
        fs::write(&target, format!("{HEADER}{}", rows(0..2))).unwrap();
        std::os::unix::fs::symlink(&target, fx.path("plant_x.csv")).unwrap();
        assert_eq!(fx.poll(), vec![]);
        assert_eq!(fx.tailer.refused_links(), [fx.path("plant_x.csv")]);
        let mut stats = PollStats::default();
        let _ = fx.tailer.poll(fx.now, &mut |_| {}).map(|s| stats = s);
        assert_eq!((stats.links_refused, stats.files), (1, 0));
        // Allowed: read as its target.
        let mut fx2 = Fixture::with(TailOptions { links_outside: true, ..opts() });
        std::os::unix::fs::symlink(&target, fx2.path("plant_x.csv")).unwrap();
        assert_eq!(recs(&fx2.poll()), want(1, 0..2));
        let mut fx = fx2;
        let mut f = OpenOptions::new().append(true).open(&target).unwrap();
        f.write_all(rows(2..3).as_bytes()).unwrap();
        assert_eq!(recs(&fx.poll()), want(1, 2..3));
    }

    #[test]
    fn header_only_files_are_told_apart_by_name() {
        let mut fx = Fixture::new();
        for d in 1..=3 {
            fx.write(&format!("plant_2026120{d}.csv"), HEADER);
        }
        assert_eq!(recs(&fx.poll()), Vec::<String>::new());
        fx.restart();
        fx.poll();
        fx.append("plant_20261202.csv", &row(2));
        fx.append("plant_20261201.csv", &row(1));
        fx.append("plant_20261203.csv", &row(3));
        let evs = fx.poll();
        assert_eq!(recs(&evs), cat(&[want(1, 1..2), want(2, 2..3), want(3, 3..4)]));
    }

    #[test]
    fn empty_file_then_header_then_rows() {
        let mut fx = Fixture::new();
        fx.write("plant_x.csv", "");
        assert_eq!(notes(&fx.poll()), vec!["1:Discovered"]);
        fx.append("plant_x.csv", "Time,Tag");
        assert_eq!(fx.poll(), vec![]);
        fx.restart();
        fx.append("plant_x.csv", ",Id,Value\n");
        fx.append("plant_x.csv", &row(0));
        let evs = fx.poll();
        assert_eq!(recs(&evs), want(1, 0..1));
    }

    #[test]
    fn sealed_fragment_is_rejected_and_delivered_if_completed_later() {
        let mut fx = Fixture::new();
        let r1 = row(1);
        fx.write("plant_1.csv", &format!("{HEADER}{}{}", row(0), &r1[..12]));
        fx.write("plant_2.csv", HEADER);
        assert_eq!(recs(&fx.poll()), want(1, 0..1));
        let evs = fx.poll_after(1000);
        assert_eq!(notes(&evs), vec!["1:Sealed(12)"]);
        assert!(evs.contains(&Ev::Rej(1, 3, RejectReason::Unterminated { bytes: 12 })));
        fx.append("plant_1.csv", &r1[12..]);
        let evs = fx.poll();
        assert_eq!(recs(&evs), want(1, 1..2));
    }

    #[test]
    fn crash_from_an_older_state_duplicates_but_loses_nothing() {
        let mut fx = Fixture::new();
        fx.write("plant_current.csv", &format!("{HEADER}{}", rows(0..2)));
        fx.poll();
        let old = fx.tailer.state();
        fx.append("plant_current.csv", &rows(2..4));
        fx.poll();
        fx.rename("plant_current.csv", "plant_r1.csv");
        fx.write("plant_current.csv", &format!("{HEADER}{}", rows(4..5)));
        fx.poll();
        fx.tailer = Tailer::new(fx.dir.path().to_path_buf(), opts(), Some(old));
        let evs = fx.poll();
        // Rows 2..4 again (after the old checkpoint), found under the new name, and row 4.
        assert_eq!(recs(&evs), cat(&[want(1, 2..4), want(2, 4..5)]));
    }

    #[test]
    fn state_of_another_version_is_ignored_and_files_are_read_again() {
        let mut fx = Fixture::new();
        fx.write("plant_x.csv", &format!("{HEADER}{}", rows(0..2)));
        fx.poll();
        let mut state = fx.tailer.state();
        state.version = 99;
        fx.tailer = Tailer::new(fx.dir.path().to_path_buf(), opts(), Some(state));
        assert_eq!(recs(&fx.poll()), want(1, 0..2));
        // An inconsistent checkpoint is dropped the same way.
        let mut state = fx.tailer.state();
        state.files[0].marker_len = state.files[0].resume.offset + 1;
        fx.tailer = Tailer::new(fx.dir.path().to_path_buf(), opts(), Some(state));
        assert_eq!(recs(&fx.poll()), want(2, 0..2));
    }

    #[test]
    fn state_round_trips_through_json() {
        let mut fx = Fixture::new();
        fx.write("plant_x.csv", &format!("{HEADER}{}", rows(0..2)));
        fx.poll();
        let s = fx.tailer.state();
        let json = serde_json::to_string_pretty(&s).unwrap();
        assert_eq!(serde_json::from_str::<TailState>(&json).unwrap(), s);
        assert_eq!(TailState::default().version, STATE_VERSION);
    }

    #[test]
    fn two_runs_over_the_same_files_emit_the_same_events() {
        let run = || {
            let mut fx = Fixture::new();
            fx.write("plant_b.csv", &format!("{HEADER}{}", rows(10..12)));
            fx.write("plant_a.csv", &format!("{HEADER}{}", rows(0..2)));
            fx.write("plant_c.csv", &format!("{HEADER}{}", rows(20..21)));
            let mut evs = fx.poll();
            fx.append("plant_c.csv", &row(21));
            fx.append("plant_a.csv", &row(2));
            evs.extend(fx.poll());
            evs
        };
        let a = run();
        assert_eq!(a, run());
        assert_eq!(
            recs(&a),
            cat(&[want(1, 0..2), want(2, 10..12), want(3, 20..21), want(1, 2..3), want(3, 21..22)])
        );
    }

    #[test]
    fn unreadable_file_is_reported_and_picked_up_later() {
        let mut fx = Fixture::new();
        fx.write("plant_x.csv", &format!("{HEADER}{}", rows(0..1)));
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            fs::set_permissions(fx.path("plant_x.csv"), fs::Permissions::from_mode(0o000)).unwrap();
            if File::open(fx.path("plant_x.csv")).is_err() {
                let evs = fx.poll();
                assert!(notes(&evs)[0].starts_with("0:Error(cannot open"), "{evs:?}");
            }
            fs::set_permissions(fx.path("plant_x.csv"), fs::Permissions::from_mode(0o644)).unwrap();
        }
        assert_eq!(recs(&fx.poll()), want(1, 0..1));
    }

    #[test]
    fn missing_directory_is_an_error_and_keeps_the_state() {
        let mut fx = Fixture::new();
        fx.write("plant_x.csv", &format!("{HEADER}{}", rows(0..1)));
        fx.poll();
        let before = fx.tailer.state();
        let mut t = Tailer::new(fx.dir.path().join("missing"), opts(), Some(before.clone()));
        let err = t.poll(0, &mut |_| {}).unwrap_err();
        assert!(err.to_string().starts_with("cannot list directory"), "{err}");
        assert_eq!(t.state(), before);
    }

    #[test]
    fn glob_matches_names() {
        let glob_match = crate::ingest::glob::name_matches;
        assert!(glob_match("plant_*.csv", "plant_20261201.csv"));
        assert!(glob_match("plant_*.csv", "plant_.csv"));
        assert!(!glob_match("plant_*.csv", "plant_x.csv.tmp"));
        assert!(glob_match("p?ant_*_*.csv", "plant_a_b.csv"));
        assert!(!glob_match("p?ant", "pant"));
        assert!(glob_match("*", ""));
        assert!(glob_match("*a*b", "xxaxxbxb"));
        assert!(glob_match("?.csv", "é.csv"));
    }
}
