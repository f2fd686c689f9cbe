//! Fuzz target: the directory tailer on files written by fuzzer-chosen steps.
//!
//! The input is a script: segments separated by the byte `0xFF`. The first byte of a segment
//! is a command, the rest its payload. With `c` the command byte, `f = (c / 8) % 3` picks one
//! of the files `exp-0.csv`, `exp-1.csv`, `exp-2.csv`, and `c % 8` the action:
//!
//! | `c % 8` | action |
//! |---|---|
//! | 0, 1 | append the payload to file `f` (created if missing) |
//! | 2 | overwrite file `f` in place with the payload (truncate, write) |
//! | 3 | atomically replace file `f` with the payload (temp file, rename) |
//! | 4 | delete file `f` |
//! | 5 | rename file `f` over file `f + 1` |
//! | 6 | let time pass beyond the seal period |
//! | 7 | restart the tailer from its state, round-tripped through JSON |
//!
//! A poll follows every segment. Properties:
//!
//! * no panic, `poll` never fails (the directory exists) and no file I/O error is reported;
//! * for files that were only ever appended to, every delivered record is exactly a record of
//!   the file split in one go (no partial row), and every checkpoint is a record boundary: a
//!   splitter restarted there reproduces the records of the one-go split after it.
//!
//! Seeds are written by `fuzz/seeds.sh`.
#![no_main]

use std::collections::{HashMap, HashSet};
use std::fs::{self, OpenOptions};
use std::io::Write;
use std::path::Path;

use efftemp::hash::fnv1a64;
use efftemp::ingest::split::{Item, Position, Splitter};
use efftemp::ingest::tail::{Notice, TailEvent, TailOptions, TailState, Tailer};
use libfuzzer_sys::fuzz_target;

const NAMES: [&str; 3] = ["exp-0.csv", "exp-1.csv", "exp-2.csv"];
const SEAL_MS: u64 = 1000;
const MAX_STEPS: usize = 48;

/// A record of a one-go split: start → (end, fields).
type Records = HashMap<u64, (u64, Vec<Vec<u8>>)>;

fn split_all(bytes: &[u8], from: Position, max: usize) -> Vec<(u64, u64, Vec<Vec<u8>>)> {
    let mut s = Splitter::new(max);
    s.reset(from);
    let mut v = Vec::new();
    s.feed(&bytes[from.offset as usize..], &mut |it| {
        if let Item::Record(r) = it {
            v.push((r.start, r.end, r.iter().map(<[u8]>::to_vec).collect()));
        }
    });
    v
}

/// Every checkpoint of an append-only file is a record boundary.
fn check_boundaries(dir: &Path, state: &TailState, clean: &HashSet<&str>, max: usize) {
    for cp in &state.files {
        if !clean.contains(cp.name.as_str()) || cp.header_hash.is_none() {
            continue;
        }
        let Ok(bytes) = fs::read(dir.join(&cp.name)) else { continue };
        let at = cp.resume.offset as usize;
        assert!(at <= bytes.len(), "checkpoint {at} past the end of {} ({} bytes)", cp.name, bytes.len());
        let whole: Vec<_> =
            split_all(&bytes, Position::START, max).into_iter().filter(|r| r.0 >= cp.resume.offset).collect();
        assert_eq!(split_all(&bytes, cp.resume, max), whole, "checkpoint {:?} of {}", cp.resume, cp.name);
        assert!(cp.data_start <= cp.resume.offset);
    }
}

fn write_file(path: &Path, bytes: &[u8], append: bool) {
    let mut f = OpenOptions::new()
        .create(true)
        .write(true)
        .append(append)
        .truncate(!append)
        .open(path)
        .expect("open for writing");
    f.write_all(bytes).expect("write");
}

fuzz_target!(|input: &[u8]| {
    let h = fnv1a64(input);
    let max = if h % 3 == 0 { 4096 } else { 24 + (h % 100) as usize };
    let opts = TailOptions {
        pattern: "*.csv".to_owned(),
        exclude: Vec::new(),
        max_record_bytes: max,
        fingerprint_bytes: 1 + (h >> 8) as usize % 32,
        marker_bytes: 1 + (h >> 16) as usize % 16,
        seal_after_ms: SEAL_MS,
        read_chunk: if h & (1 << 30) == 0 { 4096 } else { 1 + (h >> 24) as usize % 13 },
        links_outside: false,
    };
    let base = if Path::new("/dev/shm").is_dir() { "/dev/shm" } else { "/tmp" };
    let tmp = tempfile::Builder::new().prefix("efftemp-fuzz-tail").tempdir_in(base).expect("tempdir");
    let dir = tmp.path();
    let mut tailer = Tailer::new(dir.to_path_buf(), opts.clone(), None);
    // Files that were only ever appended to (by name).
    let mut clean: HashSet<&str> = NAMES.iter().copied().collect();
    let mut now = 0u64;

    for seg in input.split(|&b| b == 0xFF).take(MAX_STEPS) {
        let Some((&c, payload)) = seg.split_first() else { continue };
        let f = usize::from(c / 8) % 3;
        let path = dir.join(NAMES[f]);
        match c % 8 {
            0 | 1 => write_file(&path, payload, true),
            2 => {
                write_file(&path, payload, false);
                clean.remove(NAMES[f]);
            }
            3 => {
                let tmp_path = dir.join(format!("{}.tmp", NAMES[f]));
                write_file(&tmp_path, payload, false);
                fs::rename(&tmp_path, &path).expect("rename temp file");
                clean.remove(NAMES[f]);
            }
            4 => {
                let _ = fs::remove_file(&path);
                clean.remove(NAMES[f]);
            }
            5 => {
                let to = (f + 1) % 3;
                if fs::rename(&path, dir.join(NAMES[to])).is_ok() {
                    clean.remove(NAMES[f]);
                    clean.remove(NAMES[to]);
                }
            }
            6 => now += SEAL_MS + 1,
            _ => {
                let json = serde_json::to_string(&tailer.state()).expect("state to JSON");
                let state: TailState = serde_json::from_str(&json).expect("state from JSON");
                tailer = Tailer::new(dir.to_path_buf(), opts.clone(), Some(state));
            }
        }
        now += 10;

        // The one-go records of every clean file, as the poll will see them.
        let mut expected: HashMap<String, Records> = HashMap::new();
        for name in &clean {
            if let Ok(bytes) = fs::read(dir.join(name)) {
                let recs = split_all(&bytes, Position::START, max);
                expected.insert(
                    dir.join(name).to_string_lossy().into_owned(),
                    recs.into_iter().map(|(s, e, fl)| (s, (e, fl))).collect(),
                );
            }
        }
        let stats = tailer
            .poll(now, &mut |ev| match ev {
                TailEvent::Record { file, record } => {
                    let key = file.path.to_string_lossy();
                    if let Some(recs) = expected.get(key.as_ref()) {
                        let fields: Vec<Vec<u8>> = record.iter().map(<[u8]>::to_vec).collect();
                        assert_eq!(
                            recs.get(&record.start),
                            Some(&(record.end, fields)),
                            "delivered record at {} of {key} is not a whole record",
                            record.start
                        );
                    }
                }
                TailEvent::Notice { notice: Notice::Error(e), .. } => panic!("I/O error: {e}"),
                _ => {}
            })
            .expect("poll");
        assert!(stats.open <= stats.files);
        check_boundaries(dir, &tailer.state(), &clean, max);
    }
});
