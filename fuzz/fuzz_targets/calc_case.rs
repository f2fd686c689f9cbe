//! Fuzz target: the `calc` case file: `Case::check`, then `Case::run` and the JSON report.
//!
//! Seeds are the shipped examples (`config/examples/*.toml`). Properties:
//!
//! * no panic;
//! * every error of the check or of the solve has a line and a message;
//! * a solved report has finite main results, and its JSON has no `null` except for the keys
//!   that are optional by design (serde_json writes NaN and infinities as `null`, so a `null`
//!   anywhere else is a non-finite number that escaped).
#![no_main]

use std::path::PathBuf;
use std::sync::{Arc, OnceLock};

use efftemp::config::case::Case;
use efftemp::source::{LocatedErrors, SourceText};
use libfuzzer_sys::fuzz_target;
use oracles::stray_null;

#[path = "../../tests/shared/oracles.rs"]
mod oracles;
use serde_json::Value;

fn dir() -> &'static PathBuf {
    static DIR: OnceLock<PathBuf> = OnceLock::new();
    DIR.get_or_init(|| {
        let base = if std::path::Path::new("/dev/shm").is_dir() { "/dev/shm" } else { "/tmp" };
        let tmp = tempfile::Builder::new().prefix("efftemp-fuzz-case").tempdir_in(base).expect("tempdir");
        tmp.keep()
    })
}

fn check_errors(errors: &LocatedErrors) {
    assert!(!errors.0.is_empty());
    for e in &errors.0 {
        assert!(e.location.line_col.is_some(), "error without a line: {e}");
        assert!(!e.message.trim().is_empty(), "error without a message: {e:?}");
    }
}

fuzz_target!(|bytes: &[u8]| {
    let Ok(text) = std::str::from_utf8(bytes) else { return };
    // Relative library paths resolve in an empty directory.
    let src = Arc::new(SourceText::new(dir().join("case.toml"), text));
    let case = match Case::check(src) {
        Ok(c) => c,
        Err(e) => return check_errors(&e),
    };
    let report = match case.run() {
        Ok(r) => r,
        Err(e) => return check_errors(&e),
    };
    for (name, x) in [
        ("effluent_temperature_k", report.effluent_temperature_k),
        ("effluent_temperature_degc", report.effluent_temperature_degc),
        ("duty_w", report.duty_w),
        ("heat_loss_w", report.heat_loss_w),
        ("effluent_flow_mol_s", report.effluent_flow_mol_s),
    ] {
        assert!(x.is_finite(), "{name} = {x}");
    }
    let json = report.to_json();
    let v: Value = serde_json::from_str(&json).expect("the report is JSON");
    if let Some(at) = stray_null(&v, &mut Vec::new()) {
        panic!("non-finite number at `{at}` in\n{json}");
    }
    let _ = report.to_text();
});
