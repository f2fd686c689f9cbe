//! The directory tailer: turns a directory of growing, rotating CSV export files into a stream
//! of complete records, with checkpoints that survive restarts.
//!
//! In short:
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
//! * One `stat` per poll is believed. On a network share with stale attributes a shrink is
//!   taken at face value; the marker check still keeps rows from being skipped, at the cost of
//!   duplicates.
//! * One tailer per export stream: sealing assumes that the newest matching file is the one
//!   being written, so two streams in one directory need two patterns.
//!
//! The code is split by concern: `notice` has what the sink receives ([`TailEvent`],
//! [`Notice`], [`RejectReason`], [`PollStats`], [`TailError`]), `checkpoint` the saved state
//! ([`TailState`], [`FileCheckpoint`]), `identity` how a file is recognised (metadata, first
//! row, header hash, fingerprint and marker checks), and this file the [`Tailer`] and the
//! phases of [`Tailer::poll`].

mod checkpoint;
mod identity;
mod notice;

use std::collections::HashMap;
use std::fs::{self, File};
use std::io;
use std::path::{Path, PathBuf};

pub use self::checkpoint::{FileCheckpoint, FileId, STATE_VERSION, TailState};
use self::identity::{HeaderInfo, Meta, Probe, Proof, check_content, probe, read_at, read_span};
pub use self::notice::{
    EndCause, FileRef, GenerationCause, Notice, PollStats, RejectReason, TailError, TailEvent,
};
use crate::hash::fnv1a64;
use crate::ingest::split::{HeldKind, Item, Position, Splitter};

/// Tailer settings.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct TailOptions {
    /// Glob on the file *name* (not the path): `*` matches any run of characters, `?` one
    /// character, everything else itself. Temporary files of atomic writers must not match.
    pub pattern: String,
    /// Names matching one of these globs are not read although `pattern` matches them (a
    /// second export stream in the same directory, e.g. a long-layout file beside wide ones).
    pub exclude: Vec<String>,
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
            exclude: Vec::new(),
            max_record_bytes: 1 << 20,
            fingerprint_bytes: 1024,
            marker_bytes: 64,
            seal_after_ms: 10 * 60 * 1000,
            read_chunk: 256 * 1024,
            links_outside: false,
        }
    }
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

/// A tracked file generation (in memory).
#[derive(Debug)]
struct Tracked {
    cp: FileCheckpoint,
    path: PathBuf,
    /// The name the file has now when it was renamed out of the pattern (it is still read
    /// through its handle): what events show, while `path` stays the matching hint.
    shown: Option<PathBuf>,
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
    /// (Signed: a file found long untouched grew before the caller's clock started.)
    last_growth_ms: i64,
    /// Found in the directory listing in this poll.
    present: bool,
    /// Content checked in this process (a loaded checkpoint is not, until matched).
    validated: bool,
    /// Detached in this poll: its file no longer holds its content.
    detached: bool,
    /// A read failed: look at the file again at the next poll even if it looks unchanged.
    stale: bool,
    /// Reading stopped at the poll's read budget before the end of the file: read on at the
    /// next poll, and never seal it before its end has been read.
    more: bool,
}

impl Tracked {
    fn from_checkpoint(cp: FileCheckpoint, dir: &Path) -> Tracked {
        Tracked {
            path: dir.join(&cp.name),
            shown: None,
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
            more: false,
        }
    }

    fn file_ref(&self) -> FileRef<'_> {
        FileRef { path: self.shown.as_deref().unwrap_or(&self.path), id: self.cp.id }
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
    dir: &'s Path,
    opts: &'s TailOptions,
    buf: &'s mut Vec<u8>,
    sink: &'s mut dyn for<'a> FnMut(TailEvent<'a>),
    last_header: &'s mut Option<Vec<String>>,
    stats: PollStats,
    now: u64,
    /// Wall-clock time of the poll, ms since the Unix epoch, if the caller gave one.
    wall_ms: Option<i64>,
    /// Data bytes this poll may still read (`u64::MAX`: no limit).
    budget: u64,
}

impl Ctx<'_> {
    /// The caller's monotonic time at which a file last modified at `mtime_ns` last grew, as
    /// far as the wall clock tells: a file found long untouched (a backlog) is already quiet,
    /// so that it can be sealed and its handle closed as soon as it has been read.
    fn grown_at(&self, mtime_ns: Option<i64>) -> i64 {
        let now = self.now_signed();
        let (Some(wall), Some(mtime)) = (self.wall_ms, mtime_ns) else { return now };
        now.saturating_sub(wall.saturating_sub(mtime / 1_000_000).max(0))
    }

    fn now_signed(&self) -> i64 {
        i64::try_from(self.now).unwrap_or(i64::MAX)
    }

    fn notice(&mut self, t: &Tracked, notice: Notice) {
        (self.sink)(TailEvent::Notice { file: t.file_ref(), notice });
    }
}

/// The limits of one [`Tailer::poll_within`].
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct PollLimits {
    /// The caller's monotonic time, ms (quiet periods).
    pub now_ms: u64,
    /// Wall-clock time, ms since the Unix epoch, to judge how long a file found on disk has
    /// been untouched (`None`: every file found counts as just grown).
    pub wall_ms: Option<i64>,
    /// Data bytes to read at most (rounded up to whole read chunks; `u64::MAX`: no limit).
    pub budget_bytes: u64,
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
        self.poll_within(&PollLimits { now_ms, wall_ms: None, budget_bytes: u64::MAX }, sink)
    }

    /// [`Tailer::poll`] within limits: at most about `budget_bytes` of data are read (whole
    /// read chunks, so up to one chunk more), in the same order as an unlimited poll would read
    /// them; [`PollStats::more`] says that the files hold more, to be read by the next poll. A
    /// file is never sealed before its end has been read, and new files are not even opened
    /// once the budget is spent (a backlog of thousands of files does not hold thousands of
    /// handles). With `wall_ms`, a file found untouched for longer than `seal_after_ms` by the
    /// wall clock counts as quiet from the start (it is sealed as soon as it has been read).
    ///
    /// # Errors
    /// As [`Tailer::poll`].
    pub fn poll_within(
        &mut self,
        limits: &PollLimits,
        sink: &mut dyn FnMut(TailEvent<'_>),
    ) -> Result<PollStats, TailError> {
        let (mut entries, refused) = self.list()?;
        self.refused = refused;
        let Tailer { dir, opts, next_id, last_header, tracked, twins, buf, refused } = self;
        let mut cx = Ctx {
            dir,
            opts,
            buf,
            sink,
            last_header,
            stats: PollStats::default(),
            now: limits.now_ms,
            wall_ms: limits.wall_ms,
            budget: limits.budget_bytes,
        };
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
        for t in tracked.iter().filter(|t| t.more) {
            stats.more = true;
            stats.unread_bytes += t.cp.size.saturating_sub(t.read_end);
        }
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
            if !crate::ingest::glob::selects(&self.opts.pattern, &self.opts.exclude, &name) {
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
            let shown = t.shown.take();
            if entries[i].path != t.path || shown.is_some() {
                let from = shown.unwrap_or_else(|| t.path.clone());
                t.path = entries[i].path.clone();
                t.cp.name = entries[i].name.clone();
                cx.notice(t, Notice::Renamed { from });
            }
        }
        if !t.stale && !t.more && m.size == t.cp.size && m.mtime_ns == t.cp.mtime_ns && m.id == t.cp.file_id {
            continue;
        }
        if t.more && cx.budget == 0 {
            // Behind already and nothing left to read with in this poll: checked next time.
            continue;
        }
        if idx.is_none() {
            // Renamed out of the pattern (or away): rows still read from it are shown under
            // the name it has now.
            locate(t, cx);
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

/// Find the name a tracked file that left the listing has now, and show its rows under it
/// (with a [`Notice::Renamed`] when it changes). A deleted file keeps its last name.
fn locate(t: &mut Tracked, cx: &mut Ctx<'_>) {
    let Some(file) = t.handle.as_ref() else { return };
    let Some(now) = current_path(file, cx.dir, t.cp.file_id) else { return };
    let shown = t.shown.as_deref().unwrap_or(&t.path);
    if now != shown {
        let from = shown.to_path_buf();
        t.shown = Some(now);
        cx.notice(t, Notice::Renamed { from });
    }
}

/// The path of an open file: on Linux from `/proc/self/fd`, elsewhere by looking for its file
/// id among the directory's entries. `None` when it was deleted or cannot be found.
fn current_path(file: &File, dir: &Path, id: Option<FileId>) -> Option<PathBuf> {
    #[cfg(target_os = "linux")]
    {
        use std::os::fd::AsRawFd;
        if let Ok(p) = fs::read_link(format!("/proc/self/fd/{}", file.as_raw_fd())) {
            if p.to_string_lossy().ends_with(" (deleted)") {
                return None;
            }
            // Still in the directory: under the directory as configured.
            let inside = p.parent().is_some_and(|d| fs::canonicalize(dir).is_ok_and(|c| c == d));
            return Some(match p.file_name() {
                Some(name) if inside => dir.join(name),
                _ => p,
            });
        }
    }
    let _ = file;
    let id = id?;
    fs::read_dir(dir)
        .ok()?
        .flatten()
        .map(|de| de.path())
        .find(|p| fs::metadata(p).ok().and_then(|m| Meta::of(&m).id) == Some(id))
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
        t.last_growth_ms = cx.grown_at(m.mtime_ns);
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

/// Read from `read_end` to the end of the file, delivering complete records, then update the
/// checkpoint, marker and fingerprint.
fn read_to_end(t: &mut Tracked, cx: &mut Ctx<'_>) -> io::Result<()> {
    let Tracked {
        cp,
        path,
        shown,
        fields,
        handle,
        split,
        read_end,
        recent,
        commit_tail,
        prefix,
        header_sent,
        stale,
        more,
        ..
    } = t;
    let (Some(file), Some(split)) = (handle.as_ref(), split.as_mut()) else { return Ok(()) };
    let file_ref = FileRef { path: shown.as_deref().unwrap_or(path.as_path()), id: cp.id };
    let fields: &[String] = fields;
    let m = cx.opts.marker_bytes;
    let fp_end = cp.data_start + cx.opts.fingerprint_bytes as u64;
    let mut result = Ok(());
    // With the poll's budget spent, a file stops before its end, but only once it has made
    // progress: a later file must not read at all (records keep the order of an unlimited
    // poll), and the file that spent the budget goes on to the end of one record (held bytes
    // are parsed again at the next poll, so stopping inside the first record would never
    // advance).
    let (entry_resume, entry_read) = (cp.resume.offset, *read_end);
    loop {
        if cx.budget == 0 && (cp.resume.offset > entry_resume || *read_end == entry_read) {
            *more = *read_end < cp.size;
            break;
        }
        // Reads stay within the budget (in pieces of at least 4 KiB).
        let len = cx.buf.len();
        let cap = usize::try_from(cx.budget).unwrap_or(usize::MAX).clamp(len.min(4096), len);
        let n = match read_at(file, &mut cx.buf[..cap], *read_end) {
            Ok(0) => {
                *more = false;
                break;
            }
            Ok(n) => n,
            Err(e) => {
                *stale = true;
                result = Err(e);
                break;
            }
        };
        cx.stats.bytes_read += n as u64;
        cx.budget = cx.budget.saturating_sub(n as u64);
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
    let old_path = t.shown.take().unwrap_or_else(|| t.path.clone());
    t.path = e.path.clone();
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
        t.last_growth_ms = cx.now_signed();
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
    t.last_growth_ms = cx.grown_at(o.meta.mtime_ns);
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
        if !e.claimed && cx.budget == 0 {
            // The read budget is spent: new files wait for the next poll, unopened.
            cx.stats.more = true;
            cx.stats.unread_bytes += e.meta.size;
            let key = e.path.to_string_lossy().into_owned();
            if let Some(&first) = twins.get(&key) {
                still_twins.insert(key, first);
            }
            continue;
        }
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
        t.last_growth_ms = cx.grown_at(o.meta.mtime_ns);
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
        let quiet = i128::from(cx.now) - i128::from(t.last_growth_ms) >= i128::from(cx.opts.seal_after_ms);
        if t.handle.is_none() || t.more || !quiet || (t.present && t.cp.id >= newest_present) {
            i += 1;
            continue;
        }
        if !t.present {
            locate(t, cx);
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
mod tests;
