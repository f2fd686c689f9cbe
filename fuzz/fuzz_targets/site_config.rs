//! Fuzz target: `SiteConfig::load` on arbitrary text written to a temporary file.
//!
//! Seeds are site configurations (`config/example-site.toml` and variants). Properties:
//!
//! * no panic;
//! * loading either succeeds or reports at least one error, and every error names a file;
//! * when the file is valid UTF-8 (so it can be read as TOML at all), every error also has a
//!   line and column, and its message is not empty.
//!
//! Relative paths in the configuration (includes, libraries) resolve inside the temporary
//! directory, which holds nothing else.
#![no_main]

use std::path::PathBuf;
use std::sync::OnceLock;

use efftemp::config::SiteConfig;
use libfuzzer_sys::fuzz_target;

fn dir() -> &'static PathBuf {
    static DIR: OnceLock<PathBuf> = OnceLock::new();
    DIR.get_or_init(|| {
        let base = if std::path::Path::new("/dev/shm").is_dir() { "/dev/shm" } else { "/tmp" };
        let tmp = tempfile::Builder::new().prefix("efftemp-fuzz-site").tempdir_in(base).expect("tempdir");
        tmp.keep()
    })
}

fuzz_target!(|bytes: &[u8]| {
    let path = dir().join("site.toml");
    std::fs::write(&path, bytes).expect("write the config");
    match SiteConfig::load(&path) {
        Ok(cfg) => {
            assert!(!cfg.units.is_empty());
            assert!(!cfg.files.is_empty());
        }
        Err(errors) => {
            assert!(!errors.0.is_empty(), "an error list without errors");
            let utf8 = std::str::from_utf8(bytes).is_ok();
            for e in &errors.0 {
                assert!(!e.location.file.as_os_str().is_empty(), "error without a file: {e}");
                assert!(!e.message.trim().is_empty(), "error without a message: {e:?}");
                if utf8 {
                    assert!(e.location.line_col.is_some(), "error without a line: {e}");
                }
            }
        }
    }
});
