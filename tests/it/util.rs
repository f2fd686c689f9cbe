//! Shared helpers for the integration tests: fixture paths, reference data, case files.

use std::path::{Path, PathBuf};

use serde_json::Value;

/// The repository root.
pub fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// A file under `tests/fixtures/`.
pub fn fixture(rel: &str) -> PathBuf {
    root().join("tests/fixtures").join(rel)
}

/// A JSON fixture.
pub fn json(rel: &str) -> Value {
    let text = std::fs::read_to_string(fixture(rel)).expect("fixture readable");
    serde_json::from_str(&text).expect("fixture is JSON")
}

/// Read the reference check table (`checks.csv`) as rows of strings keyed by column.
pub fn checks() -> Vec<std::collections::HashMap<String, String>> {
    let mut rdr = csv_rows(&fixture("reference/checks.csv"));
    rdr.retain(|r| !r.is_empty());
    rdr
}

/// Minimal CSV reader (quoted fields, commas) for the reference tables.
pub fn csv_rows(path: &Path) -> Vec<std::collections::HashMap<String, String>> {
    let text = std::fs::read_to_string(path).expect("csv readable");
    let mut lines = text.lines();
    let header = split_csv(lines.next().unwrap_or_default());
    lines
        .filter(|l| !l.trim().is_empty())
        .map(|l| header.iter().cloned().zip(split_csv(l)).collect())
        .collect()
}

fn split_csv(line: &str) -> Vec<String> {
    let mut out = Vec::new();
    let mut cur = String::new();
    let mut quoted = false;
    let mut chars = line.chars().peekable();
    while let Some(c) = chars.next() {
        match c {
            '"' if quoted && chars.peek() == Some(&'"') => {
                cur.push('"');
                chars.next();
            }
            '"' => quoted = !quoted,
            ',' if !quoted => out.push(std::mem::take(&mut cur)),
            _ => cur.push(c),
        }
    }
    out.push(cur);
    out
}

/// A TOML case that reproduces a reference balance case: one feed with the case's molar
/// flows, and (when the effluent differs from the feed) one reaction derived from the change.
pub fn reference_case_toml(case: &Value, path: &str, pressure: Option<f64>) -> String {
    let feed = case["feed_mol_s"].as_object().expect("feed");
    let eff = case["effluent_mol_s"].as_object().expect("effluent");
    let total: f64 = feed.values().map(|v| v.as_f64().unwrap_or(0.0)).sum();
    let mut s = String::new();
    s.push_str("[model]\n");
    s.push_str(&format!("enthalpy = \"{path}\"\n"));
    if let Some(n) = case.get("watson_exponent").and_then(Value::as_f64) {
        s.push_str(&format!("watson_n = {n:?}\n"));
    }
    if let Some(p) = pressure {
        s.push_str(&format!("pressure = {p:?}\n"));
    }
    s.push_str("\n[[feed]]\n");
    s.push_str(&format!("flow = {total:?}\n"));
    s.push_str(&format!("temperature = {:?}\n", case["T_in_K"].as_f64().unwrap_or_default()));
    let comp: Vec<String> =
        feed.iter().map(|(k, v)| format!("\"{k}\" = {:?}", v.as_f64().unwrap_or(0.0) / total)).collect();
    s.push_str(&format!("composition = {{ {} }}\n", comp.join(", ")));
    // Reaction from the change in flows.
    let mut diff: Vec<(String, f64)> = Vec::new();
    for (k, v) in eff {
        let f = feed.get(k).and_then(Value::as_f64).unwrap_or(0.0);
        let d = v.as_f64().unwrap_or(0.0) - f;
        if d.abs() > 1e-12 {
            diff.push((k.clone(), d));
        }
    }
    for (k, v) in feed {
        if !eff.contains_key(k) {
            diff.push((k.clone(), -v.as_f64().unwrap_or(0.0)));
        }
    }
    if let Some((key, dk)) = diff.iter().find(|(_, d)| *d < 0.0).cloned() {
        let extent = -dk;
        let key_feed = feed.get(&key).and_then(Value::as_f64).unwrap_or(0.0);
        let stoich: Vec<String> = diff.iter().map(|(k, d)| format!("\"{k}\" = {:?}", d / extent)).collect();
        s.push_str("\n[[reaction]]\n");
        s.push_str(&format!("stoichiometry = {{ {} }}\n", stoich.join(", ")));
        s.push_str(&format!("key = \"{key}\"\n"));
        s.push_str(&format!("conversion = {:?}\n", extent / key_feed));
    }
    s.push_str("\n[heater]\n");
    s.push_str(&format!("duty = {:?}\n", case["Q_W"].as_f64().unwrap_or_default()));
    s
}

/// Write `text` to a fresh temp dir and return (dir guard, path).
pub fn temp_file(name: &str, text: &str) -> (tempfile::TempDir, PathBuf) {
    let dir = tempfile::tempdir().expect("tempdir");
    let path = dir.path().join(name);
    std::fs::write(&path, text).expect("write temp file");
    (dir, path)
}
