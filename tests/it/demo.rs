//! `efftemp demo` end to end on a short simulated period (our own invented plant): the real
//! service watching the export directory while the simulator writes it in accelerated time.
//! Every injected event of the short run is detected with the right cause, nothing else is
//! raised, and the files the demo points the user at exist. The soft-tag file written live is
//! also byte-identical to a `replay` of the same exports (live vs replay with the native
//! watcher).

use efftemp::app::demo::{DemoOptions, run};

#[test]
fn short_demo_detects_every_event_with_the_right_cause_and_nothing_else() {
    let dir = tempfile::tempdir().unwrap();
    let days = 3.2;
    // Thermometer bias (day 2.0), analyzer outage (day 2.6), stuck transmitter (day 3.0).
    let opts = DemoOptions {
        seed: 1,
        days,
        speed: Some(days * 86_400.0 / 25.0),
        out: Some(dir.path().join("demo")),
        discard: false,
        verbose: false,
    };
    let r = run(&opts).unwrap();
    let card = efftemp::app::demo::scorecard(&r);
    assert_eq!(r.scores.len(), 3, "{card}");
    for s in &r.scores {
        assert!(s.first_alert.is_some(), "not detected: {}\n{card}", s.event.description);
        assert!(s.right_cause, "wrong cause for {}\n{card}", s.event.description);
    }
    assert!(r.false_alerts.is_empty(), "false alerts:\n{card}");
    assert!(!r.soft_tags.is_empty() && !r.alert_logs.is_empty(), "{card}");
    assert!(!r.reports.is_empty(), "no shift report written:\n{card}");
    for p in r.soft_tags.iter().chain(&r.alert_logs).chain(&r.reports) {
        assert!(p.is_file(), "{}", p.display());
        assert!(card.contains(&p.display().to_string()) || p.starts_with(&r.dir), "{}", p.display());
    }

    // Live vs replay: the same exports replayed give the same soft-tag files, byte for byte.
    let site = efftemp::config::SiteConfig::load(&r.dir.join("site.toml")).unwrap();
    let again = dir.path().join("replayed");
    efftemp::app::replay::replay(&site, Some(again.clone())).unwrap();
    // The live service stopped before the wait for late data expired on the last intervals
    // (the one still open and those within the reorder window), which a replay closes at the
    // end of its input: the last file may lack those rows.
    let spec = &site.units[0].spec;
    let lag_rows = 1 + usize::try_from(spec.reorder_ms / spec.interval_ms).unwrap();
    for (i, live) in r.soft_tags.iter().enumerate() {
        let name = live.file_name().unwrap();
        let replayed = again.join("R-204").join(name);
        let (a, mut b) = (std::fs::read(live).unwrap(), std::fs::read(&replayed).unwrap());
        if i + 1 == r.soft_tags.len() && b.len() > a.len() && b.starts_with(&a) {
            let tail = String::from_utf8_lossy(&b[a.len()..]).into_owned();
            assert!(
                tail.lines().count() <= lag_rows,
                "live output lags by more than {lag_rows} intervals:\n{tail}"
            );
            b.truncate(a.len());
        }
        if a != b {
            let (a, b) = (String::from_utf8_lossy(&a), String::from_utf8_lossy(&b));
            let (la, lb): (Vec<&str>, Vec<&str>) = (a.lines().collect(), b.lines().collect());
            let i = la.iter().zip(&lb).position(|(x, y)| x != y).unwrap_or(la.len().min(lb.len()));
            panic!(
                "{} differs between live ({} lines) and replay ({} lines) at line {}:\nlive:   {:?}\nreplay: {:?}",
                name.to_string_lossy(),
                la.len(),
                lb.len(),
                i + 1,
                la.get(i),
                lb.get(i)
            );
        }
    }
}
