//! The shift report: its structure (a snapshot with numbers and times redacted), the `report`
//! command, and a real-browser rendering check (headless Chromium: the DOM has the plots and
//! tables, and a screenshot is produced and not blank).
//!
//! The data come from the embedded simulator (our own invented plant) with a thermometer bias
//! step injected during the reported shift.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::OnceLock;

use efftemp::app::sim::{self, EventKind as Fault, Scenario};

/// One simulated run shared by the tests of this module: (temp dir, config, report path, stdout).
struct Reported {
    _dir: tempfile::TempDir,
    html: PathBuf,
    stdout: String,
}

/// The reported shift contains this instant: 2026-11-22 16:48 UTC (Europe/London: GMT), the
/// 14:00–22:00 shift of the simulated plant.
const SHIFT_AT: &str = "2026-11-22T16:48:00Z";

fn reported() -> &'static Reported {
    static R: OnceLock<Reported> = OnceLock::new();
    R.get_or_init(|| {
        let dir = tempfile::tempdir().unwrap();
        // Bias step at day 1.6 (2026-11-22 14:24 UTC), inside the reported shift.
        let ev = Scenario::event(Fault::ThermometerBias, 1.6, 30.0, 2.0, Some("TI-2050"));
        let scenario = Scenario::single(7, 2.0, ev);
        sim::write_exports(&scenario, &dir.path().join("exports")).unwrap();
        let cfg = dir.path().join("site.toml");
        let text = sim::site_config("exports", "state", "output", false, "10m", 60)
            .replace("[service]", "[service]\nalerts_to_stdout = false");
        std::fs::write(&cfg, text).unwrap();
        let out = Command::new(env!("CARGO_BIN_EXE_efftemp"))
            .args(["replay", "--config"])
            .arg(&cfg)
            .output()
            .unwrap();
        assert!(out.status.success(), "replay failed: {}", String::from_utf8_lossy(&out.stderr));
        let out = Command::new(env!("CARGO_BIN_EXE_efftemp"))
            .args(["report", "--unit", "R-204", "--shift", SHIFT_AT, "--config"])
            .arg(&cfg)
            .output()
            .unwrap();
        assert!(out.status.success(), "report failed: {}", String::from_utf8_lossy(&out.stderr));
        let stdout = String::from_utf8(out.stdout).unwrap();
        let html = stdout
            .lines()
            .find_map(|l| l.trim().strip_prefix("report: "))
            .map(PathBuf::from)
            .unwrap_or_else(|| panic!("no report path in:\n{stdout}"));
        Reported { _dir: dir, html, stdout }
    })
}

/// The element skeleton of an HTML document: one line per element (indented by depth) with
/// its `id` and `class`, the text of headings, table header cells and SVG text; digits are
/// redacted to `#` so times and values do not make the snapshot brittle, and runs of identical
/// sibling lines are folded into one with a count.
fn skeleton(html: &str) -> String {
    let mut lines: Vec<String> = Vec::new();
    let mut depth = 0usize;
    let mut rest = html;
    let mut open: Vec<String> = Vec::new();
    const VOID: [&str; 4] = ["meta", "br", "hr", "img"];
    while let Some(lt) = rest.find('<') {
        let text = rest[..lt].trim();
        if !text.is_empty()
            && let Some(top) = open.last()
            && matches!(top.as_str(), "h1" | "h2" | "th" | "text" | "title")
        {
            lines.push(format!("{}\"{}\"", "  ".repeat(depth), redact(text)));
        }
        let Some(gt) = rest[lt..].find('>') else { break };
        let tag = &rest[lt + 1..lt + gt];
        rest = &rest[lt + gt + 1..];
        if tag.starts_with('!') {
            continue;
        }
        if let Some(name) = tag.strip_prefix('/') {
            open.pop();
            depth = depth.saturating_sub(1);
            let _ = name;
            continue;
        }
        let self_closing = tag.ends_with('/');
        let name: String =
            tag.split(|c: char| c.is_whitespace() || c == '/').next().unwrap_or("").to_string();
        let mut desc = name.clone();
        for attr in ["id", "class"] {
            if let Some(v) = attr_value(tag, attr) {
                desc.push_str(&format!(" {attr}={}", redact(&v)));
            }
        }
        if name == "style" || name == "script" {
            // Skip the content.
            let close = format!("</{name}>");
            if let Some(end) = rest.find(&close) {
                rest = &rest[end + close.len()..];
            }
            lines.push(format!("{}{desc}", "  ".repeat(depth)));
            continue;
        }
        lines.push(format!("{}{desc}", "  ".repeat(depth)));
        if !self_closing && !VOID.contains(&name.as_str()) {
            open.push(name);
            depth += 1;
        }
    }
    // Fold runs of identical lines.
    let mut out = String::new();
    let mut i = 0;
    while i < lines.len() {
        let mut j = i + 1;
        while j < lines.len() && lines[j] == lines[i] {
            j += 1;
        }
        if j - i > 1 {
            out.push_str(&format!("{} (x{})\n", lines[i], j - i));
        } else {
            out.push_str(&lines[i]);
            out.push('\n');
        }
        i = j;
    }
    out
}

fn attr_value(tag: &str, attr: &str) -> Option<String> {
    let pat = format!(" {attr}=\"");
    let start = tag.find(&pat)? + pat.len();
    let end = tag[start..].find('"')?;
    Some(tag[start..start + end].to_string())
}

fn redact(s: &str) -> String {
    s.chars().map(|c| if c.is_ascii_digit() { '#' } else { c }).collect()
}

#[test]
fn report_structure_matches_the_snapshot() {
    let r = reported();
    let html = std::fs::read_to_string(&r.html).unwrap();
    // Self-contained: no scripts, no external resources.
    let without_ns = html.replace("xmlns=\"http://www.w3.org/2000/svg\"", "");
    for bad in ["<script", "http://", "https://", "src=", "<link", "url("] {
        assert!(!without_ns.contains(bad), "report contains `{bad}`");
    }
    insta::assert_snapshot!("shift_report_skeleton", skeleton(&html));
}

#[test]
fn report_content_tells_the_shift_story() {
    let r = reported();
    let html = std::fs::read_to_string(&r.html).unwrap();
    // Four plots, each with labelled axes and units.
    for id in ["plot-temperature", "plot-residual", "plot-effectiveness", "plot-conversion"] {
        assert!(html.contains(&format!("<figure id=\"{id}\">")), "missing {id}");
    }
    assert!(html.contains("°C"), "temperature axis without its unit");
    // The thermometer bias injected in this shift is in the alert table as an instrument fault
    // naming the thermometer.
    let table = &html[html.find("id=\"alerts\"").unwrap()..html.find("id=\"data-quality\"").unwrap()];
    assert!(table.contains("instrument_fault"), "alert table: {table}");
    assert!(table.contains("TI-2050"), "alert table: {table}");
    // The cautions of DESIGN §6 in the footer.
    let footer = &html[html.find("<footer>").unwrap()..];
    for words in ["advisory", "safety instrumented function", "automatic control", "alarm system"] {
        assert!(footer.contains(words), "footer lacks `{words}`");
    }
    // The plain-text summary on stdout says the same.
    assert!(r.stdout.contains("R-204"), "{}", r.stdout);
    assert!(r.stdout.contains("instrument_fault"), "{}", r.stdout);
    assert!(r.stdout.contains("advisory"), "{}", r.stdout);
}

/// The report as a real browser sees it. Needs Chromium, so it is ignored in a plain
/// `cargo test`; `.ci/run` installs Debian's `chromium` and runs it with `--ignored`.
#[test]
#[ignore = "needs chromium (apt-get install chromium); .ci/run runs it"]
fn report_renders_in_a_real_browser() {
    let browser = ["chromium", "chromium-browser", "google-chrome"]
        .iter()
        .find_map(|b| which(b))
        .expect("no chromium on PATH: install it with `apt-get install chromium`; .ci/run does");
    let r = reported();
    let profile = tempfile::tempdir().unwrap();
    let url = format!("file://{}", r.html.display());
    let run = |extra: &[&str]| {
        let out = Command::new(&browser)
            .args(["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking"])
            .args(["--disable-dev-shm-usage", "--no-first-run", "--hide-scrollbars"])
            .arg(format!("--user-data-dir={}", profile.path().display()))
            .args(extra)
            .arg(&url)
            .output()
            .unwrap();
        assert!(out.status.success(), "chromium failed: {}", String::from_utf8_lossy(&out.stderr));
        out
    };
    // The DOM after parsing and layout.
    let dom = String::from_utf8_lossy(&run(&["--dump-dom"]).stdout).into_owned();
    assert_eq!(dom.matches("<figure id=\"plot-").count(), 4, "plots in the DOM");
    assert!(dom.matches("<svg").count() >= 4, "svg elements in the DOM");
    assert!(dom.matches("<polyline").count() >= 4, "plot lines in the DOM");
    for id in ["headline", "alerts", "data-quality", "validity"] {
        assert!(dom.contains(&format!("id=\"{id}\"")), "section {id} missing from the DOM");
    }
    assert!(dom.matches("<table").count() >= 3, "tables in the DOM");
    // A screenshot: produced, the expected size, and not blank.
    let shot = profile.path().join("shot.png");
    run(&[&format!("--screenshot={}", shot.display()), "--window-size=900,1600"]);
    let (w, h, pixels) = decode_png(&shot);
    assert_eq!((w, h), (900, 1600));
    let mut colours = std::collections::HashSet::new();
    let mut dark = 0usize;
    for px in pixels.chunks(4) {
        colours.insert((px[0] >> 3, px[1] >> 3, px[2] >> 3));
        if u32::from(px[0]) + u32::from(px[1]) + u32::from(px[2]) < 300 {
            dark += 1;
        }
    }
    assert!(colours.len() > 20, "screenshot looks blank: {} colours", colours.len());
    // Text and plot lines: at least 0.5 % of the page is dark ink.
    assert!(dark * 200 > pixels.len() / 4, "screenshot has almost no ink: {dark} dark pixels");
}

fn which(name: &str) -> Option<PathBuf> {
    let path = std::env::var_os("PATH")?;
    std::env::split_paths(&path).map(|d| d.join(name)).find(|p| p.is_file())
}

/// Decode a PNG to RGBA8.
fn decode_png(path: &Path) -> (u32, u32, Vec<u8>) {
    let decoder = png::Decoder::new(std::io::BufReader::new(std::fs::File::open(path).unwrap()));
    let mut reader = decoder.read_info().unwrap();
    let mut buf = vec![0; reader.output_buffer_size().unwrap()];
    let info = reader.next_frame(&mut buf).unwrap();
    buf.truncate(info.buffer_size());
    let rgba = match info.color_type {
        png::ColorType::Rgba => buf,
        png::ColorType::Rgb => buf.chunks(3).flat_map(|c| [c[0], c[1], c[2], 255]).collect(),
        other => panic!("unexpected PNG colour type {other:?}"),
    };
    (info.width, info.height, rgba)
}
