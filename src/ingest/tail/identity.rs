//! File identity: cheap metadata (file id, size, modification time), the first row of a file
//! and the header it gives a generation, and the content check (header, fingerprint, marker)
//! that decides whether a file still holds what a checkpoint committed.

use std::fs::{self, File};
use std::io;

use super::TailOptions;
use super::checkpoint::{FileCheckpoint, FileId};
use super::notice::PollStats;
use crate::hash::fnv1a64;
use crate::ingest::split::{Item, Position, Splitter};

/// Bytes read per probe of a file's first row.
const PROBE_CHUNK: usize = 8 * 1024;

/// Cheap facts about a file, for the unchanged-file fast path.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub(super) struct Meta {
    pub(super) id: Option<FileId>,
    pub(super) size: u64,
    pub(super) mtime_ns: Option<i64>,
}

impl Meta {
    pub(super) fn of(m: &fs::Metadata) -> Meta {
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
pub(super) fn read_at(file: &File, buf: &mut [u8], off: u64) -> io::Result<usize> {
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
pub(super) fn read_span(file: &File, off: u64, len: u64, stats: &mut PollStats) -> io::Result<Vec<u8>> {
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

/// The header row as resolved for a generation.
#[derive(Clone, Debug)]
pub(super) struct HeaderInfo {
    pub(super) fields: Vec<String>,
    pub(super) hash: u64,
    /// Boundary after the header row (the data start).
    pub(super) data_start: Position,
    pub(super) inherited: bool,
    pub(super) utf8_ok: bool,
    pub(super) too_long: bool,
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
pub(super) struct Probe {
    /// The file starts with a NUL hole.
    hole: bool,
    /// Its first row, if complete.
    first: Option<First>,
}

impl Probe {
    /// The header for a generation: the first row, unless the file starts with a NUL hole and
    /// `inherit` (the directory's header) is known and differs from that row, in which case the
    /// writer continued without a header and every row after the hole is data.
    pub(super) fn resolve(&self, inherit: Option<&[String]>) -> Option<HeaderInfo> {
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
pub(super) fn probe(file: &File, max_record: usize, stats: &mut PollStats) -> io::Result<Probe> {
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
pub(super) struct Proof {
    pub(super) header: HeaderInfo,
    pub(super) tail: Vec<u8>,
    pub(super) prefix: Vec<u8>,
}

/// Whether `file` (of `size` bytes, first row `pr`) holds the content `cp` committed: same
/// header, same fingerprint, long enough, same marker before the checkpoint. Needs a header.
pub(super) fn check_content(
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
