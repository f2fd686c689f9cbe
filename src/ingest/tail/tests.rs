//! Tests of the tailer: growth, rotation, replacement, restarts, symlinks and damaged files.
#![allow(clippy::unwrap_used)]

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
        exclude: Vec::new(),
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
        assert_eq!(collect(cp.resume), whole, "checkpoint {:?} of {} is not a boundary", cp.resume, cp.name);
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

/// Rows (and rejections) of a file renamed out of the pattern while it is still being read are
/// reported under the name it has now, not under its old name (which a new file may have).
#[test]
fn a_file_renamed_out_of_the_pattern_is_reported_under_its_new_name() {
    let mut fx = Fixture::new();
    fx.write("plant_x.csv", &format!("{HEADER}{}", rows(0..1)));
    assert_eq!(recs(&fx.poll()), want(1, 0..1));
    fx.rename("plant_x.csv", "plant_x.csv.1");
    fx.append("plant_x.csv.1", &format!("{}\n{}", "x".repeat(300), row(1)));
    fx.append("plant_x.csv.1", "2026-12-01T00:00:02Z,FI-2011,unterminated");
    fx.write("plant_x.csv", HEADER);
    let mut seen: Vec<(u64, String, PathBuf)> = Vec::new();
    let mut collect = |fx: &mut Fixture, advance: u64| {
        fx.now += advance;
        fx.tailer
            .poll(fx.now, &mut |e| {
                let (file, what) = match &e {
                    TailEvent::Record { file, .. } => (file, "record".to_string()),
                    TailEvent::Rejected { file, reason, .. } => (file, format!("{reason:?}")),
                    TailEvent::Notice { file, notice } => (file, short(notice)),
                    TailEvent::Header { file, .. } => (file, "header".to_string()),
                };
                seen.push((file.id, what, file.path.to_path_buf()));
            })
            .unwrap();
    };
    collect(&mut fx, 10);
    collect(&mut fx, 1000);
    let of_first: Vec<&(u64, String, PathBuf)> = seen.iter().filter(|(id, _, _)| *id == 1).collect();
    assert!(of_first.iter().any(|(_, w, _)| w.starts_with("TooLong")), "{seen:?}");
    assert!(of_first.iter().any(|(_, w, _)| w == "record"), "{seen:?}");
    assert!(of_first.iter().any(|(_, w, _)| w.starts_with("Unterminated")), "{seen:?}");
    for (_, what, path) in of_first.iter().filter(|(_, w, _)| w != "Renamed") {
        assert!(path.ends_with("plant_x.csv.1"), "{what} reported under {}", path.display());
    }
    assert!(of_first.iter().any(|(_, w, p)| w == "Renamed" && p.ends_with("plant_x.csv.1")), "{seen:?}");
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

/// Every record of `tailer`'s directory, polled with `limits` until nothing more is waiting;
/// with the largest number of open handles seen after a poll.
fn drain(tailer: &mut Tailer, limits: PollLimits) -> (Vec<String>, usize, usize) {
    let (mut out, mut open, mut polls) = (Vec::new(), 0, 0);
    loop {
        polls += 1;
        let stats = tailer
            .poll_within(&limits, &mut |e| {
                if let TailEvent::Record { file, record } = e {
                    let f: Vec<String> =
                        record.iter().map(|b| String::from_utf8_lossy(b).into_owned()).collect();
                    out.push(format!("{}:{}", file.id, f.join(",")));
                }
            })
            .unwrap();
        open = open.max(stats.open);
        if !stats.more {
            return (out, open, polls);
        }
        assert!(stats.unread_bytes > 0, "more to read but nothing counted as waiting");
        assert!(polls < 10_000, "bounded polls never finish");
    }
}

#[test]
fn bounded_polls_read_a_backlog_in_order_with_few_open_files() {
    let fx = Fixture::new();
    let day_ago = std::time::SystemTime::now() - std::time::Duration::from_secs(86_400);
    for f in 0..6u32 {
        let name = format!("plant_{f}.csv");
        fx.write(&name, &format!("{HEADER}{}", rows(f * 40..f * 40 + 40)));
        File::options().write(true).open(fx.path(&name)).unwrap().set_modified(day_ago).unwrap();
    }
    let wall = jiff::Timestamp::now().as_millisecond();
    // One unlimited poll: every file read, each kept open until it has been quiet for a while.
    let mut one = Tailer::new(fx.dir.path().to_path_buf(), opts(), None);
    let unlimited = PollLimits { now_ms: 10, wall_ms: None, budget_bytes: u64::MAX };
    let (all, open_all, polls) = drain(&mut one, unlimited);
    assert_eq!((all.len(), open_all, polls), (240, 6, 1));
    // Slices of about 100 bytes: the same records in the same order, and files untouched for a
    // day are closed as soon as they have been read (new ones are not opened while behind).
    let mut sliced = Tailer::new(fx.dir.path().to_path_buf(), opts(), None);
    let limits = PollLimits { now_ms: 10, wall_ms: Some(wall), budget_bytes: 100 };
    let (got, open_max, polls) = drain(&mut sliced, limits);
    assert_eq!(got, all);
    assert!(polls > 50, "the budget did not bound the polls: {polls}");
    assert!(open_max <= 2, "{open_max} files open at once");
    // A checkpoint taken mid-backlog resumes exactly where the slices stopped.
    let mut part = Tailer::new(fx.dir.path().to_path_buf(), opts(), None);
    let mut first = Vec::new();
    for _ in 0..20 {
        part.poll_within(&limits, &mut |e| {
            if let TailEvent::Record { file, record } = e {
                let f: Vec<String> = record.iter().map(|b| String::from_utf8_lossy(b).into_owned()).collect();
                first.push(format!("{}:{}", file.id, f.join(",")));
            }
        })
        .unwrap();
    }
    assert!(!first.is_empty() && first.len() < all.len());
    check_boundaries(fx.dir.path(), &part.state());
    let mut resumed = Tailer::new(fx.dir.path().to_path_buf(), opts(), Some(part.state()));
    let (rest, _, _) = drain(&mut resumed, limits);
    first.extend(rest);
    assert_eq!(first, all);
}

#[test]
fn a_file_stopped_at_the_budget_is_not_sealed_before_its_end() {
    let mut fx = Fixture::new();
    let day_ago = std::time::SystemTime::now() - std::time::Duration::from_secs(86_400);
    fx.write("plant_a.csv", &format!("{HEADER}{}", rows(0..1)));
    fx.write("plant_b.csv", &format!("{HEADER}{}", rows(100..101)));
    fx.poll();
    // plant_a gets a backlog written a day ago (by the wall clock it has long been quiet, and
    // it has a newer sibling) ...
    fx.append("plant_a.csv", &rows(1..80));
    File::options().write(true).open(fx.path("plant_a.csv")).unwrap().set_modified(day_ago).unwrap();
    // ... and a budget stops reading it midway: it stays open until its end is read.
    let wall = jiff::Timestamp::now().as_millisecond();
    let limits = PollLimits { now_ms: fx.now + 10, wall_ms: Some(wall), budget_bytes: 50 };
    let (mut n, mut sealed_at, mut rejected, mut polls) = (0, None, 0, 0);
    loop {
        polls += 1;
        let stats = fx
            .tailer
            .poll_within(&limits, &mut |e| match e {
                TailEvent::Record { file, .. } if file.id == 1 => n += 1,
                TailEvent::Rejected { .. } => rejected += 1,
                TailEvent::Notice { file, notice: Notice::Sealed { .. } } if file.id == 1 => {
                    sealed_at.get_or_insert(n);
                }
                _ => {}
            })
            .unwrap();
        if !stats.more {
            break;
        }
        assert!(polls < 1_000, "bounded polls never finish: {n} rows, sealed at {sealed_at:?}");
    }
    assert!(polls > 5, "the budget did not bound the polls: {polls}");
    assert_eq!((n, sealed_at, rejected), (79, Some(79), 0));
}
