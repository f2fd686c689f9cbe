//! The state directory: an exclusive lock (two instances never share state) and the
//! checkpoint, written atomically (temp file, fsync, rename, directory fsync) with a checksum
//! and a fallback generation.
//!
//! File format: the first line is `efftemp-state <version> <fnv1a64 of the payload, hex>`, the
//! rest is the JSON payload. On load the newest generation whose checksum matches wins; a torn,
//! empty or foreign file falls back to the previous generation, and with no valid generation the
//! service starts from the beginning of the export files (outputs are idempotent, so nothing is
//! written twice).

use std::fs::{self, File, OpenOptions};
use std::io::{self, Write};
use std::path::{Path, PathBuf};

use serde::Serialize;
use serde::de::DeserializeOwned;

use crate::hash::fnv1a64;

/// Checkpoint format version.
pub const VERSION: u32 = 1;
const CURRENT: &str = "state.json";
const PREVIOUS: &str = "state.prev.json";
const TEMP: &str = "state.json.tmp";
/// The next checkpoint while the outputs it describes are synced (never loaded: until it is
/// renamed to `CURRENT` they may not be durable).
const PENDING: &str = "state.json.pending";
const LOCK: &str = "efftemp.lock";

/// Why the state directory cannot be used.
#[derive(Debug, thiserror::Error)]
pub enum StateError {
    /// Another instance holds the lock.
    #[error(
        "state directory {dir} is locked by another efftemp instance ({holder}); stop it or use another state_dir"
    )]
    Locked {
        /// The directory.
        dir: PathBuf,
        /// What the lock file says.
        holder: String,
    },
    /// The directory is writable by others than its owner.
    #[error(
        "state directory {dir} is group- or world-writable (mode {mode:04o}); refusing to use it: make it owned by the service user with mode 0750 or 0700"
    )]
    WorldWritable {
        /// The directory.
        dir: PathBuf,
        /// Its mode.
        mode: u32,
    },
    /// I/O.
    #[error("state directory {dir}: {source}")]
    Io {
        /// The directory.
        dir: PathBuf,
        /// The error.
        source: io::Error,
    },
}

/// Whether a directory mode lets others than its owner write (group or world, sticky bit or
/// not: anyone could still plant requests or a checkpoint): such a state directory is refused.
pub fn writable_by_others(mode: u32) -> bool {
    mode & 0o022 != 0
}

/// An open, locked state directory.
#[derive(Debug)]
pub struct StateDir {
    dir: PathBuf,
    _lock: File,
    /// Checkpoints written.
    pub writes: u64,
    /// Checkpoint writes that failed.
    pub failures: u64,
}

fn io_err(dir: &Path) -> impl FnOnce(io::Error) -> StateError + '_ {
    move |source| StateError::Io { dir: dir.to_path_buf(), source }
}

impl StateDir {
    /// Create (if needed), check and lock the state directory.
    pub fn open(dir: &Path) -> Result<StateDir, StateError> {
        #[cfg(not(unix))]
        fs::create_dir_all(dir).map_err(io_err(dir))?;
        #[cfg(unix)]
        {
            use std::os::unix::fs::{DirBuilderExt as _, PermissionsExt};
            fs::DirBuilder::new().recursive(true).mode(0o750).create(dir).map_err(io_err(dir))?;
            let mode = fs::metadata(dir).map_err(io_err(dir))?.permissions().mode();
            if writable_by_others(mode) {
                return Err(StateError::WorldWritable { dir: dir.to_path_buf(), mode: mode & 0o7777 });
            }
        }
        let path = dir.join(LOCK);
        let mut lock = OpenOptions::new()
            .create(true)
            .truncate(false)
            .read(true)
            .write(true)
            .open(&path)
            .map_err(io_err(dir))?;
        match lock.try_lock() {
            Ok(()) => {}
            Err(fs::TryLockError::WouldBlock) => {
                let holder = fs::read_to_string(&path).unwrap_or_default().trim().to_string();
                return Err(StateError::Locked { dir: dir.to_path_buf(), holder });
            }
            Err(fs::TryLockError::Error(e)) => {
                return Err(StateError::Io { dir: dir.to_path_buf(), source: e });
            }
        }
        lock.set_len(0).map_err(io_err(dir))?;
        writeln!(lock, "pid {}", std::process::id()).map_err(io_err(dir))?;
        Ok(StateDir { dir: dir.to_path_buf(), _lock: lock, writes: 0, failures: 0 })
    }

    /// The directory.
    pub fn path(&self) -> &Path {
        &self.dir
    }

    /// Load the newest valid checkpoint. Returns the value and notes about skipped generations.
    pub fn load<T: DeserializeOwned>(&self) -> (Option<T>, Vec<String>) {
        let mut notes = Vec::new();
        for name in [CURRENT, PREVIOUS, TEMP] {
            let path = self.dir.join(name);
            let text = match fs::read_to_string(&path) {
                Ok(t) => t,
                Err(e) if e.kind() == io::ErrorKind::NotFound => continue,
                Err(e) => {
                    notes.push(format!("{}: unreadable ({e})", path.display()));
                    continue;
                }
            };
            match decode::<T>(&text) {
                Ok(v) => return (Some(v), notes),
                Err(why) => notes.push(format!("{}: {why}; trying the previous generation", path.display())),
            }
        }
        (None, notes)
    }

    /// Write the next checkpoint beside the current one, durable but not yet in use (a crash
    /// now leaves the current one in force). Runs while the outputs it describes are being
    /// synced; [`StateDir::commit`] puts it in force once they are.
    ///
    /// # Errors
    /// When it cannot be serialized or written.
    pub fn prepare<T: Serialize>(dir: &Path, value: &T) -> io::Result<Prepared> {
        let payload = serde_json::to_vec(value).map_err(io::Error::other)?;
        Self::prepare_payload(dir, &payload)
    }

    /// [`StateDir::prepare`] for a payload already serialized (JSON text).
    ///
    /// # Errors
    /// When it cannot be written.
    pub fn prepare_payload(dir: &Path, payload: &[u8]) -> io::Result<Prepared> {
        let path = dir.join(PENDING);
        let mut f = File::create(&path)?;
        writeln!(f, "efftemp-state {VERSION} {:016x}", fnv1a64(payload))?;
        f.write_all(payload)?;
        f.sync_all()?;
        Ok(Prepared { path })
    }

    /// Put a prepared checkpoint in force, keeping the previous generation.
    ///
    /// # Errors
    /// When a rename or the directory sync fails.
    pub fn commit(&mut self, prepared: Prepared) -> io::Result<()> {
        let r = self.commit_inner(&prepared.path);
        match &r {
            Ok(()) => self.writes += 1,
            Err(_) => self.failures += 1,
        }
        r
    }

    fn commit_inner(&self, pending: &Path) -> io::Result<()> {
        let cur = self.dir.join(CURRENT);
        if cur.exists() {
            fs::rename(&cur, self.dir.join(PREVIOUS))?;
        }
        fs::rename(pending, &cur)?;
        sync_dir(&self.dir)
    }

    /// A failed checkpoint that never reached [`StateDir::commit`] (counted for `/metrics`).
    pub fn failed(&mut self) {
        self.failures += 1;
    }
}

/// A checkpoint written but not yet in force ([`StateDir::prepare`]).
#[derive(Debug)]
pub struct Prepared {
    path: PathBuf,
}

fn sync_dir(dir: &Path) -> io::Result<()> {
    #[cfg(unix)]
    {
        File::open(dir)?.sync_all()?;
    }
    let _ = dir;
    Ok(())
}

fn decode<T: DeserializeOwned>(text: &str) -> Result<T, String> {
    let (first, payload) = text.split_once('\n').ok_or("no header line")?;
    let mut parts = first.split_whitespace();
    if parts.next() != Some("efftemp-state") {
        return Err("not an efftemp checkpoint".into());
    }
    let version: u32 = parts.next().and_then(|v| v.parse().ok()).ok_or("no version")?;
    if version != VERSION {
        return Err(format!("checkpoint version {version}, this build reads {VERSION}"));
    }
    let sum = parts.next().and_then(|s| u64::from_str_radix(s, 16).ok()).ok_or("no checksum")?;
    if fnv1a64(payload.as_bytes()) != sum {
        return Err("checksum mismatch (torn or edited file)".into());
    }
    serde_json::from_str(payload).map_err(|e| format!("unreadable payload: {e}"))
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    impl StateDir {
        /// Prepare and commit at once (the pipeline overlaps the two with the outputs' sync).
        fn save<T: Serialize>(&mut self, value: &T) -> io::Result<()> {
            let p = Self::prepare(&self.dir, value)?;
            self.commit(p)
        }
    }

    #[test]
    fn round_trip_generations_and_corruption() {
        let dir = tempfile::tempdir().unwrap();
        let mut s = StateDir::open(dir.path()).unwrap();
        assert_eq!(s.load::<Vec<u32>>().0, None);
        s.save(&vec![1u32]).unwrap();
        s.save(&vec![1u32, 2]).unwrap();
        assert_eq!(s.load::<Vec<u32>>().0, Some(vec![1, 2]));
        // A torn current generation falls back to the previous one.
        let cur = dir.path().join(CURRENT);
        let text = fs::read_to_string(&cur).unwrap();
        fs::write(&cur, &text[..text.len() - 2]).unwrap();
        let (v, notes) = s.load::<Vec<u32>>();
        assert_eq!(v, Some(vec![1]));
        assert!(notes[0].contains("checksum mismatch"), "{notes:?}");
        fs::write(&cur, "").unwrap();
        assert_eq!(s.load::<Vec<u32>>().0, Some(vec![1]));
    }

    #[test]
    fn a_second_instance_is_refused() {
        let dir = tempfile::tempdir().unwrap();
        let _first = StateDir::open(dir.path()).unwrap();
        let second = StateDir::open(dir.path());
        assert!(matches!(second, Err(StateError::Locked { .. })), "{second:?}");
    }

    #[cfg(unix)]
    #[test]
    fn world_writable_state_is_refused() {
        use std::os::unix::fs::PermissionsExt;
        let dir = tempfile::tempdir().unwrap();
        for mode in [0o777, 0o1777, 0o770, 0o1770] {
            fs::set_permissions(dir.path(), fs::Permissions::from_mode(mode)).unwrap();
            let got = StateDir::open(dir.path());
            assert!(matches!(got, Err(StateError::WorldWritable { .. })), "mode {mode:o}: {got:?}");
        }
        for mode in [0o700, 0o750, 0o755] {
            fs::set_permissions(dir.path(), fs::Permissions::from_mode(mode)).unwrap();
            assert!(StateDir::open(dir.path()).is_ok(), "mode {mode:o}");
        }
        // A new state directory is created 0750 (whatever the umask allows of it).
        let fresh = dir.path().join("new/state");
        drop(StateDir::open(&fresh).unwrap());
        let mode = fs::metadata(&fresh).unwrap().permissions().mode() & 0o777;
        assert_eq!(mode & !0o750, 0, "{mode:o}");
    }
}
