//! Append-only files with one file per local day (`<prefix><YYYY-MM-DD><suffix>`), shared by
//! the soft-tag and alert writers: switching days, flushing and syncing, finding the files of
//! a unit, and reading the last complete line (repairing a half-written one at start).

use std::fs::{self, File, OpenOptions};
use std::io::{self, BufWriter, Read, Seek, SeekFrom, Write};
use std::path::{Path, PathBuf};

use super::durable::SyncSet;

/// Read the last complete line of a file. With `repair`, a half-written tail is truncated
/// first (the writers, at start); without, it is only skipped (readers such as the report).
pub fn last_complete_line(path: &Path, repair: bool) -> io::Result<Option<String>> {
    let mut f = OpenOptions::new().read(true).write(repair).open(path)?;
    let len = f.metadata()?.len();
    if len == 0 {
        return Ok(None);
    }
    let window = len.min(256 * 1024);
    f.seek(SeekFrom::Start(len - window))?;
    let mut buf = Vec::with_capacity(usize::try_from(window).unwrap_or(0));
    f.read_to_end(&mut buf)?;
    let keep = match buf.iter().rposition(|&b| b == b'\n') {
        Some(i) => i + 1,
        None if window == len => 0,
        None => return Ok(None),
    };
    if keep < buf.len() {
        if repair {
            // A crash left a partial line: drop it (its content is regenerated on re-processing).
            f.set_len(len - window + keep as u64)?;
            f.sync_all()?;
        }
        buf.truncate(keep);
    }
    let text = String::from_utf8_lossy(&buf);
    Ok(text.lines().rev().find(|l| !l.trim().is_empty()).map(str::to_string))
}

/// Files in `dir` named `<prefix><YYYY-MM-DD><suffix>`, with their date, oldest first.
pub fn dated_files(dir: &Path, prefix: &str, suffix: &str) -> Vec<(String, PathBuf)> {
    let mut v: Vec<(String, PathBuf)> = fs::read_dir(dir)
        .into_iter()
        .flatten()
        .flatten()
        .filter_map(|e| {
            let name = e.file_name();
            let date = name.to_str()?.strip_prefix(prefix)?.strip_suffix(suffix)?;
            (date.len() == 10).then(|| (date.to_string(), e.path()))
        })
        .collect();
    v.sort();
    v
}

/// An append-only dated file with a header.
pub struct DayFile {
    /// Its local date.
    pub day: String,
    /// The buffered file.
    pub out: BufWriter<File>,
    /// Its path.
    pub path: PathBuf,
    /// Its length when it was last named for an fsync (or opened).
    pub synced_len: u64,
}

/// Open (create) the file `name` of `day` for appending, writing `header` into a new file.
pub fn open_day(dir: &Path, name: &str, day: &str, header: Option<&str>) -> io::Result<DayFile> {
    fs::create_dir_all(dir)?;
    let path = dir.join(name);
    let len = fs::metadata(&path).map(|m| m.len()).unwrap_or(0);
    let file = OpenOptions::new().create(true).append(true).open(&path)?;
    let mut out = BufWriter::with_capacity(64 * 1024, file);
    if len == 0
        && let Some(h) = header
    {
        writeln!(out, "{h}")?;
    }
    // A file that existed was synced before the checkpoint that names it; a new one was not.
    let synced_len = if len == 0 { u64::MAX } else { len };
    Ok(DayFile { day: day.to_string(), out, path, synced_len })
}

/// The file of `day` (`<prefix><day><suffix>`), switching to it from the current one (which
/// is flushed and synced first) when the day changed.
pub fn day_file<'a>(
    current: &'a mut Option<DayFile>,
    dir: &Path,
    prefix: &str,
    suffix: &str,
    day: &str,
    header: Option<&str>,
) -> io::Result<&'a mut DayFile> {
    if current.as_ref().is_some_and(|c| c.day != day) {
        flush_day(current, true)?;
        *current = None;
    }
    match current {
        Some(c) => Ok(c),
        None => Ok(current.insert(open_day(dir, &format!("{prefix}{day}{suffix}"), day, header)?)),
    }
}

/// Flush the current file and name it in `set` for an fsync if it grew since it was last
/// named (or always, when the set is forced).
///
/// # Errors
/// When the flush fails.
pub fn flush_day_into(current: &mut Option<DayFile>, set: &mut SyncSet) -> io::Result<()> {
    if let Some(c) = current.as_mut() {
        c.out.flush()?;
        let len = c.out.get_ref().metadata()?.len();
        if set.force || len != c.synced_len {
            set.add(c.out.get_ref(), c.path.clone(), true)?;
            c.synced_len = len;
        }
    }
    Ok(())
}

/// Flush the current file, and fsync it when `sync`.
pub fn flush_day(current: &mut Option<DayFile>, sync: bool) -> io::Result<()> {
    if let Some(c) = current.as_mut() {
        c.out.flush()?;
        if sync {
            c.out.get_ref().sync_all()?;
        }
    }
    Ok(())
}
