//! Model-based tests of the directory tailer (see src/ingest/tail.rs).
//!
//! A simulated exporter writes, rotates, truncates, replaces and deletes CSV files in a real
//! temp directory, and the tailer is polled, restarted and crashed in between. An in-memory
//! oracle records which rows each file holds whole. Properties:
//!
//! * **no loss**: every row that was complete in a file matching the pattern when a poll
//!   started has been delivered once that poll returns (cumulatively over all tailer
//!   incarnations);
//! * **no partial row**: every delivered record is exactly a row that was written whole, and a
//!   header row is never delivered as data;
//! * **headers first**: a record of a file is preceded by that file's header in the same
//!   tailer incarnation;
//! * **exactly once** unless the sequence contains a crash (restart from an older state) or a
//!   replacement with different content that re-exports earlier rows;
//! * **checkpoints are record boundaries** of the files they describe;
//! * nothing is rejected except unterminated fragments of sealed files, and no I/O error occurs.
//!
//! `TAILER_PROPTEST_CASES` sets the number of cases (default 256, about a second).

use std::collections::{BTreeMap, HashMap, HashSet};
use std::fs::{self, OpenOptions};
use std::io::Write;
use std::path::Path;

use efftemp::hash::fnv1a64;
use efftemp::ingest::split::{Item, Position, Splitter};
use efftemp::ingest::tail::{Notice, PollLimits, RejectReason, TailEvent, TailOptions, TailState, Tailer};
use proptest::prelude::*;

const HEADER_FIELDS: [&str; 5] = ["Time", "Id", "Tag", "Value", "Note"];
const SEAL_MS: u64 = 1000;

/// What the simulated world can do.
#[derive(Clone, Debug)]
enum Action {
    /// The exporter appends `n` rows (finishing a pending partial row first).
    AppendRows(u8),
    /// The exporter writes part of a row (cut at the index, never the whole row).
    AppendPartial(usize),
    /// The exporter finishes its partial row (wherever that file now is).
    CompletePartial,
    /// The exporter starts a new dated file; the old one stays.
    RotateNewDatedFile { crlf: bool, bom: bool },
    /// Rename the current file to an archive name; a new file takes the name.
    RotateRename,
    /// Rename the current file to a name outside the pattern; a new file takes the name.
    RenameOutOfPattern,
    /// Copy the current file to an archive name, truncate it and write the header again.
    CopyTruncate,
    /// Truncate the current file and write the header again.
    Truncate,
    /// Truncate and refill with new rows past the old size, in place.
    TruncateAndRefill,
    /// Atomically replace the current file with its content plus `n` rows.
    AtomicReplaceSuperset(u8),
    /// Atomically replace the current file with a new row, some old rows re-exported, and more.
    AtomicReplaceDifferent(u8),
    /// Delete one of the files (a new current file is started if it was the current one).
    Delete(usize),
    /// Delete the current file and create it again with a header and maybe rows.
    DeleteAndRecreate(u8),
    /// Save the state as JSON, drop the tailer, start a new one from the JSON.
    Restart,
    /// Start a new tailer from a state saved `k` polls ago (or none).
    Crash(u8),
    /// Poll after advancing the clock.
    Poll(u64),
}

fn action() -> impl Strategy<Value = Action> {
    prop_oneof![
        6 => (1u8..4).prop_map(Action::AppendRows),
        3 => any::<usize>().prop_map(Action::AppendPartial),
        2 => Just(Action::CompletePartial),
        1 => (any::<bool>(), any::<bool>()).prop_map(|(crlf, bom)| Action::RotateNewDatedFile { crlf, bom }),
        1 => Just(Action::RotateRename),
        1 => Just(Action::RenameOutOfPattern),
        1 => Just(Action::CopyTruncate),
        1 => Just(Action::Truncate),
        1 => Just(Action::TruncateAndRefill),
        1 => (0u8..3).prop_map(Action::AtomicReplaceSuperset),
        1 => (0u8..3).prop_map(Action::AtomicReplaceDifferent),
        1 => any::<usize>().prop_map(Action::Delete),
        1 => (0u8..3).prop_map(Action::DeleteAndRecreate),
        1 => Just(Action::Restart),
        1 => (0u8..4).prop_map(Action::Crash),
        6 => prop::sample::select(vec![0u64, 10, 400, SEAL_MS, 2 * SEAL_MS]).prop_map(Action::Poll),
    ]
}

/// The fields of row `serial` (a unique id; every fifth row has a quoted note spanning lines).
fn row_fields(serial: u32) -> Vec<String> {
    let tag = if serial.is_multiple_of(2) { "FI-2011" } else { "TI-2050" };
    let note = match serial % 5 {
        3 => "first line\nsecond, line".to_owned(),
        4 => "quoted \"word\"".to_owned(),
        _ => String::new(),
    };
    vec![
        format!("2026-12-01T{:02}:{:02}:{:02}Z", serial / 3600 % 24, serial / 60 % 60, serial % 60),
        format!("row-{serial:06}"),
        tag.to_owned(),
        format!("{}.{}", serial * 7 % 100, serial % 10),
        note,
    ]
}

fn encode_fields(fields: &[String], crlf: bool) -> Vec<u8> {
    let text: Vec<String> = fields
        .iter()
        .map(|f| {
            if f.contains([',', '"', '\n', '\r']) {
                format!("\"{}\"", f.replace('"', "\"\""))
            } else {
                f.clone()
            }
        })
        .collect();
    let mut out = text.join(",").into_bytes();
    out.extend_from_slice(if crlf { b"\r\n" } else { b"\n" });
    out
}

fn key(fields: &[String]) -> String {
    fields.join("\u{1f}")
}

/// A file as the oracle knows it.
#[derive(Clone, Debug)]
struct ModelFile {
    /// The name matches the tailer's pattern.
    matching: bool,
    crlf: bool,
    bom: bool,
    /// Rows complete in the file (by serial), in order.
    rows: Vec<u32>,
}

impl ModelFile {
    fn header_bytes(&self) -> Vec<u8> {
        let mut out = if self.bom { vec![0xEF, 0xBB, 0xBF] } else { Vec::new() };
        let h: Vec<String> = HEADER_FIELDS.iter().map(|s| (*s).to_owned()).collect();
        out.extend(encode_fields(&h, self.crlf));
        out
    }

    fn row_bytes(&self, serial: u32) -> Vec<u8> {
        encode_fields(&row_fields(serial), self.crlf)
    }

    fn content(&self) -> Vec<u8> {
        let mut out = self.header_bytes();
        for &r in &self.rows {
            out.extend(self.row_bytes(r));
        }
        out
    }
}

/// The exporter's row in progress.
#[derive(Clone, Debug)]
struct Partial {
    file: String,
    serial: u32,
    written: usize,
    /// Its terminator's `\r` is written, so it is already complete for a CSV reader.
    counted: bool,
}

/// The simulated directory and its oracle.
struct World {
    dir: tempfile::TempDir,
    files: BTreeMap<String, ModelFile>,
    current: String,
    partial: Option<Partial>,
    next_serial: u32,
    next_name: u32,
    /// Every row written whole (by key).
    written: HashSet<String>,
}

impl World {
    fn new() -> World {
        let dir = tempfile::tempdir().unwrap();
        let mut w = World {
            dir,
            files: BTreeMap::new(),
            current: String::new(),
            partial: None,
            next_serial: 1,
            next_name: 0,
            written: HashSet::new(),
        };
        w.current = w.start_file("plant_current.csv", false, false);
        w
    }

    fn path(&self, name: &str) -> std::path::PathBuf {
        self.dir.path().join(name)
    }

    fn fresh_name(&mut self, stem: &str) -> String {
        self.next_name += 1;
        format!("plant_{stem}_{:04}.csv", self.next_name)
    }

    fn new_serial(&mut self) -> u32 {
        let s = self.next_serial;
        self.next_serial += 1;
        s
    }

    fn append(&self, name: &str, bytes: &[u8]) {
        let mut f = OpenOptions::new().append(true).open(self.path(name)).unwrap();
        f.write_all(bytes).unwrap();
    }

    /// Create `name` with only a header.
    fn start_file(&mut self, name: &str, crlf: bool, bom: bool) -> String {
        let m = ModelFile { matching: true, crlf, bom, rows: Vec::new() };
        fs::write(self.path(name), m.header_bytes()).unwrap();
        self.files.insert(name.to_owned(), m);
        name.to_owned()
    }

    fn note_whole(&mut self, serial: u32) {
        self.written.insert(key(&row_fields(serial)));
    }

    /// The exporter finishes its pending row.
    fn complete_partial(&mut self) {
        let Some(p) = self.partial.take() else { return };
        let m = &self.files[&p.file];
        let bytes = m.row_bytes(p.serial);
        self.append(&p.file, &bytes[p.written..]);
        if !p.counted {
            self.files.get_mut(&p.file).unwrap().rows.push(p.serial);
            self.note_whole(p.serial);
        }
    }

    /// Forget the pending row if it is in `name` (its file was truncated, replaced, deleted).
    fn abandon_partial_in(&mut self, name: &str) {
        if self.partial.as_ref().is_some_and(|p| p.file == name) {
            self.partial = None;
        }
    }

    fn append_rows(&mut self, n: u8) {
        self.complete_partial();
        let cur = self.current.clone();
        let mut bytes = Vec::new();
        for _ in 0..n {
            let s = self.new_serial();
            bytes.extend(self.files[&cur].row_bytes(s));
            self.files.get_mut(&cur).unwrap().rows.push(s);
            self.note_whole(s);
        }
        self.append(&cur, &bytes);
    }

    fn append_partial(&mut self, cut: usize) {
        self.complete_partial();
        let cur = self.current.clone();
        let s = self.new_serial();
        let m = &self.files[&cur];
        let bytes = m.row_bytes(s);
        let k = 1 + cut % (bytes.len() - 1);
        let counted = m.crlf && k == bytes.len() - 1;
        self.append(&cur, &bytes[..k]);
        if counted {
            self.files.get_mut(&cur).unwrap().rows.push(s);
            self.note_whole(s);
        }
        self.partial = Some(Partial { file: cur, serial: s, written: k, counted });
    }

    /// Rewrite `name` in place: truncate to zero, then write `m`'s content.
    fn rewrite_in_place(&mut self, name: &str, m: ModelFile) {
        let f = OpenOptions::new().write(true).open(self.path(name)).unwrap();
        f.set_len(0).unwrap();
        drop(f);
        self.append(name, &m.content());
        self.files.insert(name.to_owned(), m);
    }

    /// Write `m` to a temp name outside the pattern and rename it over `name`.
    fn replace_atomically(&mut self, name: &str, m: ModelFile) {
        fs::write(self.path(".plant_export.tmp"), m.content()).unwrap();
        fs::rename(self.path(".plant_export.tmp"), self.path(name)).unwrap();
        self.files.insert(name.to_owned(), m);
    }

    fn apply(&mut self, a: &Action) {
        let cur = self.current.clone();
        match a {
            Action::AppendRows(n) => self.append_rows(*n),
            Action::AppendPartial(cut) => self.append_partial(*cut),
            Action::CompletePartial => self.complete_partial(),
            Action::RotateNewDatedFile { crlf, bom } => {
                let name = self.fresh_name("day");
                self.current = self.start_file(&name, *crlf, *bom);
            }
            Action::RotateRename => {
                let archive = self.fresh_name("arch");
                fs::rename(self.path(&cur), self.path(&archive)).unwrap();
                let m = self.files.remove(&cur).unwrap();
                if let Some(p) = self.partial.as_mut().filter(|p| p.file == cur) {
                    p.file = archive.clone();
                }
                let (crlf, bom) = (m.crlf, m.bom);
                self.files.insert(archive, m);
                self.start_file(&cur, crlf, bom);
            }
            Action::RenameOutOfPattern => {
                self.next_name += 1;
                let away = format!("plant_current.csv.{}", self.next_name);
                fs::rename(self.path(&cur), self.path(&away)).unwrap();
                let mut m = self.files.remove(&cur).unwrap();
                if let Some(p) = self.partial.as_mut().filter(|p| p.file == cur) {
                    p.file = away.clone();
                }
                let (crlf, bom) = (m.crlf, m.bom);
                m.matching = false;
                self.files.insert(away, m);
                self.start_file(&cur, crlf, bom);
            }
            Action::CopyTruncate => {
                let archive = self.fresh_name("copy");
                fs::copy(self.path(&cur), self.path(&archive)).unwrap();
                let m = self.files[&cur].clone();
                self.files.insert(archive, m.clone());
                // The copy keeps the fragment of a pending row, which is never finished.
                self.abandon_partial_in(&cur);
                self.rewrite_in_place(&cur, ModelFile { rows: Vec::new(), ..m });
            }
            Action::Truncate => {
                self.abandon_partial_in(&cur);
                let m = self.files[&cur].clone();
                self.rewrite_in_place(&cur, ModelFile { rows: Vec::new(), ..m });
            }
            Action::TruncateAndRefill => {
                self.abandon_partial_in(&cur);
                let old_len = fs::metadata(self.path(&cur)).unwrap().len() as usize;
                let mut m = ModelFile { rows: Vec::new(), ..self.files[&cur].clone() };
                while m.content().len() <= old_len + 1 {
                    let s = self.new_serial();
                    m.rows.push(s);
                    self.note_whole(s);
                }
                self.rewrite_in_place(&cur, m);
            }
            Action::AtomicReplaceSuperset(n) => {
                // The replacement finishes the pending row if it was in this file.
                let mut m = self.files[&cur].clone();
                if let Some(p) = self.partial.take() {
                    if p.file == cur {
                        if !p.counted {
                            m.rows.push(p.serial);
                            self.note_whole(p.serial);
                        }
                    } else {
                        self.partial = Some(p);
                    }
                }
                for _ in 0..*n {
                    let s = self.new_serial();
                    m.rows.push(s);
                    self.note_whole(s);
                }
                self.replace_atomically(&cur, m);
            }
            Action::AtomicReplaceDifferent(n) => {
                self.abandon_partial_in(&cur);
                let old = self.files[&cur].clone();
                let first = self.new_serial();
                self.note_whole(first);
                let mut rows = vec![first];
                rows.extend(old.rows.iter().copied().skip(1).step_by(2));
                for _ in 0..*n {
                    let s = self.new_serial();
                    rows.push(s);
                    self.note_whole(s);
                }
                self.replace_atomically(&cur, ModelFile { rows, ..old });
            }
            Action::Delete(i) => {
                let names: Vec<String> = self.files.keys().cloned().collect();
                let name = names[i % names.len()].clone();
                fs::remove_file(self.path(&name)).unwrap();
                self.files.remove(&name);
                self.abandon_partial_in(&name);
                if name == cur {
                    let fresh = self.fresh_name("day");
                    self.current = self.start_file(&fresh, false, false);
                }
            }
            Action::DeleteAndRecreate(n) => {
                fs::remove_file(self.path(&cur)).unwrap();
                self.abandon_partial_in(&cur);
                let old = self.files.remove(&cur).unwrap();
                self.start_file(&cur, old.crlf, old.bom);
                for _ in 0..*n {
                    self.append_rows(1);
                }
            }
            Action::Restart | Action::Crash(_) | Action::Poll(_) => {}
        }
    }
}

fn options(chunk: usize, fp: usize, marker: usize) -> TailOptions {
    TailOptions {
        pattern: "plant_*.csv".into(),
        exclude: Vec::new(),
        max_record_bytes: 4096,
        fingerprint_bytes: fp,
        marker_bytes: marker,
        seal_after_ms: SEAL_MS,
        read_chunk: chunk,
        links_outside: false,
    }
}

/// Every checkpoint whose file still holds its content is a record boundary: a fresh splitter
/// started there gives the same records as a whole-file parse after it.
fn check_boundaries(dir: &Path, state: &TailState) -> Result<(), TestCaseError> {
    for cp in &state.files {
        let Ok(bytes) = fs::read(dir.join(&cp.name)) else { continue };
        let at = cp.resume.offset as usize;
        let ml = cp.marker_len as usize;
        if cp.header_hash.is_none() || bytes.len() < at || fnv1a64(&bytes[at - ml..at]) != cp.marker {
            continue;
        }
        let collect = |from: Position| {
            let mut s = Splitter::new(1 << 20);
            s.reset(from);
            let mut v = Vec::new();
            s.feed(&bytes[from.offset as usize..], &mut |it| {
                if let Item::Record(r) = it {
                    v.push((r.start, r.end, r.line, r.iter().map(<[u8]>::to_vec).collect::<Vec<_>>()));
                }
            });
            v
        };
        let whole: Vec<_> =
            collect(Position::START).into_iter().filter(|r| r.0 >= cp.resume.offset).collect();
        prop_assert_eq!(collect(cp.resume), whole, "checkpoint {:?} of {}", cp.resume, cp.name);
    }
    Ok(())
}

/// Run one action sequence; check the properties.
///
/// With a `budget` (bytes per poll), each poll of the sequence is repeated until the tailer says
/// it has read everything (as the service does while it catches up), and the same properties
/// must hold: nothing lost, nothing partial, no duplicates, checkpoints on boundaries.
fn run(actions: &[Action], chunk: usize, fp: usize, marker: usize, budget: u64) -> Result<(), TestCaseError> {
    let mut w = World::new();
    let opts = options(chunk, fp, marker);
    let mut tailer = Tailer::new(w.dir.path().to_path_buf(), opts.clone(), None);
    let mut now = 0u64;
    let mut saved: Vec<TailState> = Vec::new();
    let mut must: HashSet<String> = HashSet::new();
    let mut delivered: HashMap<String, usize> = HashMap::new();
    let mut headers_seen: HashSet<u64> = HashSet::new();
    let mut dup_allowed = false;
    let finale = [Action::CompletePartial, Action::Poll(0), Action::Poll(SEAL_MS), Action::Poll(SEAL_MS)];
    for a in actions.iter().chain(finale.iter()) {
        w.apply(a);
        match a {
            Action::Restart => {
                let json = serde_json::to_string(&tailer.state()).unwrap();
                let state: TailState = serde_json::from_str(&json).unwrap();
                tailer = Tailer::new(w.dir.path().to_path_buf(), opts.clone(), Some(state));
                headers_seen.clear();
            }
            Action::Crash(k) => {
                let k = usize::from(*k);
                let state = (k < saved.len()).then(|| saved[saved.len() - 1 - k].clone());
                tailer = Tailer::new(w.dir.path().to_path_buf(), opts.clone(), state);
                headers_seen.clear();
                dup_allowed = true;
            }
            Action::AtomicReplaceDifferent(_) => dup_allowed = true,
            Action::Poll(dt) => {
                now += dt;
                for m in w.files.values().filter(|m| m.matching) {
                    must.extend(m.rows.iter().map(|&r| key(&row_fields(r))));
                }
                let mut failure: Option<String> = None;
                let mut fail = |msg: String| {
                    failure.get_or_insert(msg);
                };
                let limits = PollLimits { now_ms: now, wall_ms: None, budget_bytes: budget };
                let mut on_event = |e: TailEvent<'_>| match e {
                    TailEvent::Header { file, fields } => {
                        if fields != HEADER_FIELDS {
                            fail(format!("header of {} is {fields:?}", file.path.display()));
                        }
                        headers_seen.insert(file.id);
                    }
                    TailEvent::Record { file, record } => {
                        let f: Vec<String> =
                            record.iter().map(|b| String::from_utf8_lossy(b).into_owned()).collect();
                        let k = key(&f);
                        if !w.written.contains(&k) {
                            fail(format!(
                                "delivered a row never written whole: {f:?} from {}",
                                file.path.display()
                            ));
                        }
                        if !headers_seen.contains(&file.id) {
                            fail(format!("record before header in {}", file.path.display()));
                        }
                        *delivered.entry(k).or_default() += 1;
                    }
                    TailEvent::Rejected { file, line, reason } => {
                        if !matches!(reason, RejectReason::Unterminated { .. }) {
                            fail(format!("rejected {reason:?} at {}:{line}", file.path.display()));
                        }
                    }
                    TailEvent::Notice { file, notice } => {
                        if let Notice::Error(e) = notice {
                            fail(format!("I/O error on {}: {e}", file.path.display()));
                        }
                    }
                };
                let mut slices = 0;
                while tailer.poll_within(&limits, &mut on_event).unwrap().more {
                    slices += 1;
                    prop_assert!(slices < 100_000, "a bounded poll never finishes");
                    if slices % 7 == 0 {
                        check_boundaries(w.dir.path(), &tailer.state())?;
                    }
                }
                if let Some(msg) = failure {
                    return Err(TestCaseError::fail(msg));
                }
                let missing: Vec<&String> = must.iter().filter(|k| !delivered.contains_key(*k)).collect();
                prop_assert!(missing.is_empty(), "rows lost: {:?}", missing);
                let state = tailer.state();
                check_boundaries(w.dir.path(), &state)?;
                saved.push(state);
            }
            _ => {}
        }
    }
    if !dup_allowed {
        let dups: Vec<(&String, &usize)> = delivered.iter().filter(|(_, n)| **n > 1).collect();
        prop_assert!(dups.is_empty(), "duplicates without a crash or re-export: {:?}", dups);
    }
    Ok(())
}

fn cases() -> u32 {
    std::env::var("TAILER_PROPTEST_CASES").ok().and_then(|s| s.parse().ok()).unwrap_or(256)
}

proptest! {
    #![proptest_config(ProptestConfig { cases: cases(), ..ProptestConfig::default() })]

    #[test]
    fn tailer_never_loses_a_row_or_delivers_a_partial_one(
        actions in prop::collection::vec(action(), 1..40),
        chunk in prop::sample::select(vec![5usize, 64, 4096]),
        fp in prop::sample::select(vec![48usize, 1024]),
        marker in prop::sample::select(vec![8usize, 64]),
        budget in prop::sample::select(vec![u64::MAX, u64::MAX, 1, 50, 700]),
    ) {
        run(&actions, chunk, fp, marker, budget)?;
    }
}

/// A fixed scenario through every action kind, so that a regression shows without shrinking.
#[test]
fn every_action_once() {
    let idx = |i: usize| i;
    let actions = vec![
        Action::AppendRows(3),
        Action::Poll(10),
        Action::AppendPartial(idx(7)),
        Action::Poll(10),
        Action::Restart,
        Action::CompletePartial,
        Action::Poll(10),
        Action::RotateNewDatedFile { crlf: true, bom: true },
        Action::AppendRows(2),
        Action::AppendPartial(idx(1000)),
        Action::Poll(10),
        Action::RotateRename,
        Action::AppendRows(1),
        Action::AppendPartial(idx(3)),
        Action::RenameOutOfPattern,
        Action::CompletePartial,
        Action::Poll(SEAL_MS),
        Action::CopyTruncate,
        Action::AppendRows(2),
        Action::Poll(10),
        Action::Truncate,
        Action::Poll(10),
        Action::AppendRows(2),
        Action::TruncateAndRefill,
        Action::Poll(10),
        Action::AtomicReplaceSuperset(2),
        Action::Poll(10),
        Action::Crash(2),
        Action::AtomicReplaceDifferent(1),
        Action::Poll(10),
        Action::Delete(idx(0)),
        Action::DeleteAndRecreate(2),
        Action::Poll(2 * SEAL_MS),
    ];
    run(&actions, 7, 48, 8, u64::MAX).unwrap();
    run(&actions, 7, 48, 8, 20).unwrap();
}

/// Throughput of one poll over a large wide file (about 100 MB, 20 numeric columns). Not a
/// CI check: run it by hand with
/// `cargo test --release --test integration poll_throughput -- --ignored --nocapture`.
#[test]
#[ignore = "measurement, run by hand in release mode"]
fn poll_throughput_on_a_large_wide_file() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("plant_big.csv");
    let mut header = vec!["Time".to_owned()];
    header.extend((0..20).map(|i| format!("FI-{:04}", 2011 + i)));
    let mut text = header.join(",");
    text.push('\n');
    let mut rows = 0u64;
    while text.len() < 100_000_000 {
        let mut line = format!("2026-12-01T{:02}:{:02}:{:02}Z", rows / 3600 % 24, rows / 60 % 60, rows % 60);
        for c in 0..20u64 {
            line.push_str(&format!(",{}.{:03}", (rows * 7 + c * 13) % 1000, (rows + c) % 1000));
        }
        line.push('\n');
        text.push_str(&line);
        rows += 1;
    }
    fs::write(&path, &text).unwrap();
    let opts = TailOptions { pattern: "plant_*.csv".into(), ..TailOptions::default() };
    let mut tailer = Tailer::new(dir.path().to_path_buf(), opts, None);
    let mut checksum = 0usize;
    let start = std::time::Instant::now();
    let stats = tailer
        .poll(0, &mut |e| {
            if let TailEvent::Record { record, .. } = e {
                checksum += record.field(20).len();
            }
        })
        .unwrap();
    let secs = start.elapsed().as_secs_f64();
    assert_eq!(stats.records, rows);
    assert!(checksum > 0);
    println!(
        "{} records, {:.1} MB in {:.3} s: {:.2} M records/s, {:.0} MB/s",
        rows,
        text.len() as f64 / 1e6,
        secs,
        rows as f64 / secs / 1e6,
        text.len() as f64 / 1e6 / secs
    );
}

// Regressions: minimal sequences the property test found during development, kept as fixed
// cases.

/// A CRLF header's `\n` was fingerprinted as content, so a header-only file "matched" a new
/// file with rows, which was then held back as its copy (rows delayed past the poll).
#[test]
fn regression_crlf_header_newline_is_not_content() {
    let actions = [
        Action::RotateNewDatedFile { crlf: true, bom: false },
        Action::RotateRename,
        Action::TruncateAndRefill,
    ];
    run(&actions, 5, 48, 8, u64::MAX).unwrap();
}

/// After a restart, a header-only generation whose file had been replaced took the new file
/// at its old name and read its rows a second time.
#[test]
fn regression_gone_header_only_generation_does_not_take_the_new_file() {
    let actions = [
        Action::Poll(0),
        Action::AtomicReplaceSuperset(1),
        Action::Poll(0),
        Action::Restart,
        Action::Poll(0),
    ];
    run(&actions, 5, 48, 8, u64::MAX).unwrap();
}

/// A partial row rewritten in place after a truncation shares its first bytes (the
/// timestamp) with the new row: the held bytes must be parsed again, not trusted.
#[test]
fn regression_partial_row_rewritten_in_place_is_parsed_again() {
    let actions = [
        Action::TruncateAndRefill,
        Action::RotateNewDatedFile { crlf: false, bom: false },
        Action::AppendPartial(2840100900659637101),
        Action::Poll(0),
        Action::CopyTruncate,
        Action::AppendRows(1),
    ];
    run(&actions, 5, 48, 8, u64::MAX).unwrap();
}

/// After a restart, a header-only generation matched a copy of another file that reused its
/// deleted file's inode, and read that copy's rows again.
#[test]
fn regression_header_only_generation_is_not_matched_by_a_reused_inode() {
    let actions = [
        Action::RotateRename,
        Action::AppendRows(1),
        Action::Poll(0),
        Action::Delete(3578375259747665006),
        Action::Restart,
        Action::CopyTruncate,
    ];
    run(&actions, 5, 48, 8, u64::MAX).unwrap();
}
