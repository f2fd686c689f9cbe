//! The on-disk queue: one file per event (written to a temporary name, fsync'd, renamed),
//! locked so that one forwarder owns it, listed in order at start.

use std::collections::VecDeque;
use std::fs::{self, File, OpenOptions};
use std::io::{self, Write};
use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use super::ForwardError;
use crate::core::alerts::AlertEvent;

const QUEUE_EXT: &str = "evt";
const QUEUE_LOCK: &str = "queue.lock";

/// What is stored per queued event: the event plus what must not change if it is resent.
#[derive(Debug, Serialize, Deserialize)]
pub(super) struct Record {
    pub(super) emit_time: jiff::Timestamp,
    pub(super) procid: u32,
    pub(super) event: AlertEvent,
}

/// One file per event, named by a zero-padded counter so a directory listing gives the order.
#[derive(Debug)]
pub(super) struct DiskQueue {
    dir: PathBuf,
    pub(super) ids: VecDeque<u64>,
    next: u64,
    _lock: File,
}

fn queue_err(dir: &Path) -> impl FnOnce(io::Error) -> ForwardError + '_ {
    move |source| ForwardError::Queue { dir: dir.to_path_buf(), source }
}

impl DiskQueue {
    pub(super) fn open(dir: &Path) -> Result<DiskQueue, ForwardError> {
        fs::create_dir_all(dir).map_err(queue_err(dir))?;
        let lock = OpenOptions::new()
            .create(true)
            .truncate(false)
            .write(true)
            .open(dir.join(QUEUE_LOCK))
            .map_err(queue_err(dir))?;
        match lock.try_lock() {
            Ok(()) => {}
            Err(fs::TryLockError::WouldBlock) => return Err(ForwardError::Locked { dir: dir.to_path_buf() }),
            Err(fs::TryLockError::Error(e)) => return Err(queue_err(dir)(e)),
        }
        let mut ids = Vec::new();
        for entry in fs::read_dir(dir).map_err(queue_err(dir))? {
            let path = entry.map_err(queue_err(dir))?.path();
            let (Some(stem), Some(ext)) =
                (path.file_stem().and_then(|s| s.to_str()), path.extension().and_then(|s| s.to_str()))
            else {
                continue;
            };
            match (ext, stem.parse::<u64>()) {
                (QUEUE_EXT, Ok(id)) => ids.push(id),
                // A write interrupted before its rename: the event was never acknowledged.
                ("tmp", Ok(_)) => {
                    let _ = fs::remove_file(&path);
                }
                _ => {}
            }
        }
        ids.sort_unstable();
        // Ids grow across runs even when the queue was empty (wall-clock microseconds as a
        // floor), so a delivered file that reappears after a power cut still sorts as older.
        let now_us = u64::try_from(jiff::Timestamp::now().as_microsecond()).unwrap_or(0);
        let next = ids.last().map_or(1, |l| l + 1).max(now_us);
        Ok(DiskQueue { dir: dir.to_path_buf(), ids: ids.into(), next, _lock: lock })
    }

    pub(super) fn path(&self, id: u64) -> PathBuf {
        self.dir.join(format!("{id:020}.{QUEUE_EXT}"))
    }

    pub(super) fn append(&mut self, rec: &Record) -> io::Result<()> {
        let id = self.next;
        let bytes = serde_json::to_vec(rec).map_err(io::Error::other)?;
        let tmp = self.dir.join(format!("{id:020}.tmp"));
        let written = File::create(&tmp).and_then(|mut f| {
            f.write_all(&bytes)?;
            f.sync_all()
        });
        if let Err(e) = written.and_then(|()| fs::rename(&tmp, self.path(id))) {
            let _ = fs::remove_file(&tmp);
            return Err(e);
        }
        self.next += 1;
        self.ids.push_back(id);
        if let Err(e) = File::open(&self.dir).and_then(|d| d.sync_all()) {
            // The event is queued; only its survival of a power cut is in doubt.
            tracing::warn!(dir = %self.dir.display(), error = %e, "syslog queue: directory fsync failed");
        }
        Ok(())
    }

    /// Delete the event at `index` of the queue order.
    pub(super) fn remove_at(&mut self, index: usize) {
        if let Some(id) = self.ids.remove(index)
            && let Err(e) = fs::remove_file(self.path(id))
            && e.kind() != io::ErrorKind::NotFound
        {
            tracing::warn!(
                file = %self.path(id).display(),
                error = %e,
                "syslog queue: cannot delete a queued event"
            );
        }
    }
}
