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
    dir: tempfile::TempDir,
    html: PathBuf,
    stdout: String,
    /// The residual baseline, K, in the evidence of the shift's instrument alert.
    baseline_k: f64,
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
        let baseline_k =
            efftemp::sinks::report::load_events(&dir.path().join("output/R-204"), "R-204", i64::MAX)
                .iter()
                .find(|e| e.cause.as_str() == "instrument_fault")
                .and_then(|e| e.evidence.get("baseline_k")?.as_f64())
                .expect("an instrument alert with the baseline in its evidence");
        Reported { dir, html, stdout, baseline_k }
    })
}

/// The demo's eleven days replayed on the example site: its last shift's report (heater
/// fouling active), the fouling alert's baseline (K) and the projected date of its latest
/// message, and the residual limits the monitor holds at the end.
struct DemoSite {
    _dir: tempfile::TempDir,
    last_report: PathBuf,
    fouling_baseline_k: f64,
    fouling_date: String,
    limits: Vec<(&'static str, f64)>,
}

/// The residual limits of a monitor (K): its baseline, alert limits (baseline ± enter_z
/// block σ) and gross limits (baseline ± gross_z interval σ), by the class of their line in
/// the residual plot.
fn limits_of(
    m: &efftemp::core::monitor::Monitor,
    site: &efftemp::config::SiteConfig,
) -> Vec<(&'static str, f64)> {
    let b = m.baseline.as_ref().expect("a learned baseline");
    let c = &site.units[0].spec.monitor;
    vec![
        ("baseline", b.mu),
        ("alert-limit", b.mu + c.enter_z * b.sigma),
        ("alert-limit", b.mu - c.enter_z * b.sigma),
        ("gross-limit", b.mu + c.gross_z * b.sigma_interval),
        ("gross-limit", b.mu - c.gross_z * b.sigma_interval),
    ]
}

/// The limits of the example site's monitor as the service left it in its checkpoint.
fn monitor_limits(cfg: &Path) -> Vec<(&'static str, f64)> {
    let site = efftemp::config::SiteConfig::load(cfg).unwrap();
    let state = efftemp::sinks::checkpoint::StateDir::open(&site.state_dir).unwrap();
    let (stored, notes) = state.load::<efftemp::pipeline::state::Stored>();
    let units = stored.unwrap_or_else(|| panic!("no checkpoint: {notes:?}")).into_units();
    limits_of(units["R-204"].monitor.as_ref().expect("a monitor in the checkpoint"), &site)
}

/// The limits of the example site's monitor after the site's exports are replayed in this
/// process (outputs to a folder of their own; a replay keeps no checkpoint).
fn replayed_limits(cfg: &Path) -> Vec<(&'static str, f64)> {
    use efftemp::pipeline::{Mode, Pipeline};
    let site = efftemp::config::SiteConfig::load(cfg).unwrap();
    let out = tempfile::tempdir().unwrap();
    let mut p = Pipeline::new(&site, &Mode::Replay { output: Some(out.path().to_path_buf()) }).unwrap();
    loop {
        let s = p.pass(0, false).unwrap();
        if s.records == 0 && !s.more {
            break;
        }
    }
    p.pass(0, true).unwrap();
    limits_of(p.units[0].monitor(), &site)
}

/// The residual plot's limit lines as laid out equal the monitor's (same classes, values
/// within 1e-9 K: the page carries them unrounded in `data-value`).
fn assert_limits(what: &str, plotted: &[(String, f64)], monitor: &[(&str, f64)]) {
    let mut got: Vec<(String, f64)> =
        plotted.iter().map(|(c, v)| (c.trim_start_matches("limit ").to_string(), *v)).collect();
    let mut want: Vec<(String, f64)> = monitor.iter().map(|(c, v)| ((*c).to_string(), *v)).collect();
    got.sort_by(|a, b| a.partial_cmp(b).unwrap());
    want.sort_by(|a, b| a.partial_cmp(b).unwrap());
    assert_eq!(got.len(), want.len(), "{what}: plotted {got:?}, monitor {want:?}");
    for (g, w) in got.iter().zip(&want) {
        assert!(g.0 == w.0 && (g.1 - w.1).abs() < 1e-9, "{what}: plotted {got:?}, monitor {want:?}");
    }
}

/// The example site in a fresh folder with the demo's exports; its configuration file.
fn example_site(dir: &Path) -> PathBuf {
    let exports = dir.join("var/exports/sru");
    let out = Command::new(env!("CARGO_BIN_EXE_efftemp"))
        .args(["demo", "--export-only"])
        .arg(&exports)
        .output()
        .unwrap();
    assert!(out.status.success(), "demo --export-only: {}", String::from_utf8_lossy(&out.stderr));
    std::fs::create_dir_all(dir.join("config")).unwrap();
    let cfg = dir.join("config/example-site.toml");
    let text = std::fs::read_to_string(crate::util::root().join("config/example-site.toml")).unwrap();
    std::fs::write(&cfg, text).unwrap();
    cfg
}

fn demo_site() -> &'static DemoSite {
    static D: OnceLock<DemoSite> = OnceLock::new();
    D.get_or_init(|| {
        let dir = tempfile::tempdir().unwrap();
        let cfg = example_site(dir.path());
        let run = |args: &[&str]| {
            let out = Command::new(env!("CARGO_BIN_EXE_efftemp"))
                .args(args)
                .arg("--config")
                .arg(&cfg)
                .output()
                .unwrap();
            assert!(out.status.success(), "{args:?}: {}", String::from_utf8_lossy(&out.stderr));
            String::from_utf8(out.stdout).unwrap()
        };
        run(&["replay"]);
        let stdout = run(&["report", "--last"]);
        let last_report = stdout
            .lines()
            .find_map(|l| l.trim().strip_prefix("report: "))
            .map(PathBuf::from)
            .unwrap_or_else(|| panic!("no report path in:\n{stdout}"));
        let events =
            efftemp::sinks::report::load_events(&dir.path().join("var/output/R-204"), "R-204", i64::MAX);
        let fouling =
            events.iter().rev().find(|e| e.cause.as_str() == "heater_fouling").expect("a fouling alert");
        let fouling_baseline_k = fouling
            .evidence
            .get("baseline_k")
            .and_then(|v| v.as_f64())
            .expect("the baseline in its evidence");
        let fouling_date = alert_date(&fouling.message).expect("a projected date in the alert");
        let limits = replayed_limits(&cfg);
        DemoSite { _dir: dir, last_report, fouling_baseline_k, fouling_date, limits }
    })
}

/// The service running on the example site with the demo's exports (from scratch), with its
/// pages on a free loopback port.
struct LiveService {
    _dir: tempfile::TempDir,
    cfg: PathBuf,
    addr: std::net::SocketAddr,
    running: crate::util::Running,
}

async fn live_service() -> LiveService {
    let dir = tempfile::tempdir().unwrap();
    let cfg = example_site(dir.path());
    let site = std::sync::Arc::new(efftemp::config::SiteConfig::load(&cfg).unwrap());
    let (tx, rx) = tokio::sync::watch::channel(efftemp::app::http::Snapshot::default());
    let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
    let addr = listener.local_addr().unwrap();
    let pages = efftemp::app::http::Pages { site: site.name.clone(), output_dir: site.output_dir.clone() };
    let limits = efftemp::app::http::HttpLimits::default();
    tokio::spawn(efftemp::app::http::serve_with_pages(
        listener,
        rx.clone(),
        Some(pages),
        std::future::pending(),
        limits,
    ));
    let running = crate::util::Running::start(site, false, Some(tx));
    // Eleven days of exports: passes until (nearly) every interval is in.
    let intervals = || rx.borrow().units.first().map_or(0, |u| u.intervals);
    let start = std::time::Instant::now();
    while intervals() < 15_800 {
        assert!(
            start.elapsed() < std::time::Duration::from_secs(120),
            "the service closed only {} intervals",
            intervals()
        );
        running.notify.notify_one();
        tokio::time::sleep(std::time::Duration::from_millis(50)).await;
    }
    LiveService { _dir: dir, cfg, addr, running }
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
    // (In-document references such as a clip path, `url(#…)`, fetch nothing.)
    let without_ns = html.replace("xmlns=\"http://www.w3.org/2000/svg\"", "").replace("url(#", "");
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
    let browser = browser();
    let r = reported();
    let profile = tempfile::tempdir().unwrap();
    let url = format!("file://{}", r.html.display());
    // The DOM after parsing and layout.
    let dom = String::from_utf8_lossy(&chromium(&browser, profile.path(), &["--dump-dom"], &url).stdout)
        .into_owned();
    assert!(dom.matches("<figure id=\"plot-").count() >= 7, "plots in the DOM");
    assert!(dom.matches("<svg").count() >= 7, "svg elements in the DOM");
    assert!(dom.matches("<polyline").count() >= 7, "plot lines in the DOM");
    for id in ["headline", "alerts", "requests", "data-quality", "validity"] {
        assert!(dom.contains(&format!("id=\"{id}\"")), "section {id} missing from the DOM");
    }
    // A screenshot: produced, the expected size, and not blank.
    let shot = profile.path().join("shot.png");
    chromium(
        &browser,
        profile.path(),
        &[&format!("--screenshot={}", shot.display()), "--window-size=900,1600"],
        &url,
    );
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

/// The browser to render with (Debian's `chromium`, or another Chromium on the PATH).
fn browser() -> PathBuf {
    ["chromium", "chromium-browser", "google-chrome"]
        .iter()
        .find_map(|b| which(b))
        .expect("no chromium on PATH: install it with `apt-get install chromium`; .ci/run does")
}

/// Run headless Chromium on `url` with `extra` flags; the output (console messages on stderr).
fn chromium(browser: &Path, profile: &Path, extra: &[&str], url: &str) -> std::process::Output {
    let out = Command::new(browser)
        .args(["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking"])
        .args([
            "--disable-dev-shm-usage",
            "--no-first-run",
            "--hide-scrollbars",
            "--enable-logging=stderr",
            "--v=0",
        ])
        .arg(format!("--user-data-dir={}", profile.display()))
        .args(extra)
        .arg(url)
        .output()
        .unwrap();
    assert!(out.status.success(), "chromium failed: {}", String::from_utf8_lossy(&out.stderr));
    out
}

/// Console errors in Chromium's log (script errors, refused or failed loads).
fn console_errors(stderr: &[u8]) -> Vec<String> {
    String::from_utf8_lossy(stderr)
        .lines()
        .filter(|l| l.contains("CONSOLE") || l.contains("Uncaught") || l.contains("Refused to"))
        .filter(|l| !l.contains("check-result"))
        .map(str::to_string)
        .collect()
}

/// What a layout check finds in a page as the browser laid it out.
#[derive(Debug, serde::Deserialize)]
#[allow(dead_code)]
struct Layout {
    /// Elements that stick out of the viewport (outside a horizontally scrolling box).
    overflow: Vec<String>,
    /// Document scroll width and viewport width.
    scroll_width: f64,
    width: f64,
    /// The projected date written on the effectiveness plot, and whether it is on screen.
    note: Option<String>,
    note_visible: bool,
    /// The projected date in the headline card, and whether it is on screen.
    card: Option<String>,
    card_visible: bool,
    /// The residual plot's limit lines: (class, value).
    limits: Vec<(String, f64)>,
    /// The active alerts' messages in the headline.
    messages: Vec<String>,
    /// Script errors caught in the page.
    errors: Vec<String>,
}

/// The script that measures a page after layout (injected into a copy of the page: the
/// pages themselves carry no script); it writes its findings into `pre#check-result` of the
/// page that frames it (see [`layout`]).
const CHECK: &str = r#"<script>(function(){var errs=[];window.addEventListener('error',function(e){errs.push(String(e.message))});
function shown(el){if(!el)return false;var r=el.getBoundingClientRect(),cs=getComputedStyle(el);if(!(r.width>0&&r.height>0)||cs.visibility==='hidden'||cs.display==='none'||parseFloat(cs.opacity)===0)return false;
var W=document.documentElement.clientWidth;var box=el.closest('.plotwrap');var lim=box?box.getBoundingClientRect():{left:0,right:W};var svg=el.closest('svg');if(svg){var s=svg.getBoundingClientRect();if(r.left<s.left-1||r.right>s.right+1)return false;}
return r.left>=Math.max(0,lim.left)-1&&r.right<=Math.min(W,lim.right)+1;}
function scrolls(el){for(var p=el.parentElement;p;p=p.parentElement){var o=getComputedStyle(p).overflowX;if(o==='auto'||o==='scroll'||o==='hidden')return true;}return false;}
window.addEventListener('load',function(){var W=document.documentElement.clientWidth,over=[];
document.querySelectorAll('body *').forEach(function(el){var r=el.getBoundingClientRect();if(r.width===0&&r.height===0)return;if((r.right>W+1||r.left<-1)&&!scrolls(el))over.push(el.tagName+'#'+el.id+' '+(el.getAttribute('class')||''));});
function drawn(sel){return [].filter.call(document.querySelectorAll(sel),function(e){var s=e.closest('svg')||e;var r=s.getBoundingClientRect();return r.width>0&&r.height>0;});}
var note=drawn('#plot-effectiveness text.projected-date')[0],card=document.querySelector('#card-projection .projected-date');
var res={overflow:over.slice(0,20),scroll_width:document.documentElement.scrollWidth,width:W,note:note?note.textContent:null,note_visible:shown(note),card:card?card.textContent:null,card_visible:shown(card),
limits:drawn('#plot-residual line.limit').map(function(l){return [l.getAttribute('class'),parseFloat(l.getAttribute('data-value'))]}),
messages:[].map.call(document.querySelectorAll('#headline .alert .msg'),function(m){return m.textContent}),errors:errs};
var top=window.parent.document;var pre=top.createElement('pre');pre.id='check-result';pre.textContent=JSON.stringify(res);top.body.appendChild(pre);});})();</script>"#;

/// Lay `html` out at `width` px in the browser and measure it; also the console errors of the
/// plain page (without the check script). The page is laid out in a frame `width` px wide
/// (a headless window is never narrower than 500 px), whose document is the page itself
/// (`srcdoc`, same origin as the frame's parent, which receives the findings).
fn layout(browser: &Path, html: &str, width: u32) -> (Layout, Vec<String>) {
    let dir = tempfile::tempdir().unwrap();
    let plain = dir.path().join("page.html");
    std::fs::write(&plain, html).unwrap();
    let checked = dir.path().join("checked.html");
    let page = html.replace("</body>", &format!("{CHECK}</body>"));
    let srcdoc = page.replace('&', "&amp;").replace('"', "&quot;");
    std::fs::write(
        &checked,
        format!(
            "<!doctype html><html><body style=\"margin:0\"><iframe style=\"border:0;display:block;width:{width}px;height:20000px\" srcdoc=\"{srcdoc}\"></iframe></body></html>"
        ),
    )
    .unwrap();
    let profile = dir.path().join("profile");
    let size = format!("--window-size={},2000", width.max(500) + 40);
    let out = chromium(
        browser,
        &profile,
        &["--dump-dom", "--virtual-time-budget=5000", &size],
        &format!("file://{}", checked.display()),
    );
    let dom = String::from_utf8_lossy(&out.stdout).into_owned();
    let json = dom
        .split("<pre id=\"check-result\">")
        .nth(1)
        .and_then(|s| s.split("</pre>").next())
        .unwrap_or_else(|| panic!("no check result in the DOM at {width} px"))
        .replace("&quot;", "\"")
        .replace("&lt;", "<")
        .replace("&gt;", ">")
        .replace("&amp;", "&");
    let found: Layout = serde_json::from_str(&json).unwrap_or_else(|e| panic!("{e}: {json}"));
    assert!((found.width - f64::from(width)).abs() < 20.0, "laid out {} px wide, not {width}", found.width);
    let plain_out = chromium(
        browser,
        &profile,
        &["--dump-dom", "--virtual-time-budget=2000", &size],
        &format!("file://{}", plain.display()),
    );
    (found, console_errors(&plain_out.stderr))
}

/// The layout checks every page passes at every width: nothing sticks out of the viewport
/// and no console error.
fn assert_fits(what: &str, width: u32, l: &Layout, console: &[String]) {
    assert!(l.overflow.is_empty(), "{what} at {width} px: elements outside the viewport: {:?}", l.overflow);
    assert!(
        l.scroll_width <= l.width + 1.0,
        "{what} at {width} px: page {} px wide in a {} px viewport",
        l.scroll_width,
        l.width
    );
    assert!(
        l.errors.is_empty() && console.is_empty(),
        "{what} at {width} px: console errors {:?} {console:?}",
        l.errors
    );
}

/// The date an alert message projects the cleaning limit on ("... limit 85 % on 2026-12-11").
fn alert_date(message: &str) -> Option<String> {
    let at = message.find(" % on ")? + " % on ".len();
    message.get(at..at + 10).map(str::to_string)
}

/// What a page printed to PDF on `paper` ("A4" or "letter") holds: its pages, the page size in
/// points and the text (pdfinfo and pdftotext of poppler-utils read the PDF).
struct Printed {
    pages: usize,
    size: (f64, f64),
    text: String,
}

fn print_pdf(browser: &Path, html: &str, paper: &str) -> Printed {
    let dir = tempfile::tempdir().unwrap();
    let page = dir.path().join("page.html");
    // The pages set margins but no paper size (the printer's default): here the paper is set
    // as a site's browser would.
    std::fs::write(&page, html.replace("</style>", &format!("@page{{size:{paper}}}</style>"))).unwrap();
    let pdf = dir.path().join("out.pdf");
    chromium(
        browser,
        &dir.path().join("p"),
        &[&format!("--print-to-pdf={}", pdf.display()), "--no-pdf-header-footer"],
        &format!("file://{}", page.display()),
    );
    let tool = |name: &str, args: &[&str]| -> String {
        let out = Command::new(name)
            .args(args)
            .arg(&pdf)
            .args(if name == "pdftotext" { &["-"][..] } else { &[][..] })
            .output()
            .unwrap_or_else(|e| panic!("{name}: {e} (apt-get install poppler-utils; .ci/run does)"));
        assert!(out.status.success(), "{name}: {}", String::from_utf8_lossy(&out.stderr));
        String::from_utf8_lossy(&out.stdout).into_owned()
    };
    let info = tool("pdfinfo", &[]);
    let field =
        |k: &str| info.lines().find_map(|l| l.strip_prefix(k)).map(str::trim).unwrap_or("").to_string();
    let pages = field("Pages:").parse().unwrap_or(0);
    let dims: Vec<f64> = field("Page size:").split_whitespace().filter_map(|v| v.parse().ok()).collect();
    let text = tool("pdftotext", &["-raw"]).split_whitespace().collect::<Vec<_>>().join(" ");
    Printed { pages, size: (dims[0], dims[1]), text }
}

/// The printed page on A4 and on Letter: the right paper, a few pages, the projected date
/// written on the plot and the alert's latest message whole (no table cut off at the margin).
fn assert_prints(browser: &Path, what: &str, html: &str, date: &str, message: &str) {
    let message = message.split_whitespace().collect::<Vec<_>>().join(" ");
    for (paper, size) in [("A4", (595.3, 841.9)), ("letter", (612.0, 792.0))] {
        let p = print_pdf(browser, html, paper);
        assert!(
            (p.size.0 - size.0).abs() < 1.0 && (p.size.1 - size.1).abs() < 1.0,
            "{what} on {paper}: page size {:?}",
            p.size
        );
        assert!((1..=12).contains(&p.pages), "{what} on {paper}: {} pages", p.pages);
        assert!(p.text.contains(&format!("limit reached {date}")), "{what} on {paper}: no projected date");
        assert!(p.text.contains(&message), "{what} on {paper}: the alert's message is cut: {message}");
    }
}

/// The demo's reports in a real browser at 1280 px and 420 px (and at 718 px, the printable
/// width of A4), then printed on A4 and Letter: the projected cleaning date is written visibly
/// on the plot and in the headline, and equals the date of the alert's latest event in the
/// alert log; the residual plot's baseline and limits are the monitor's (its checkpoint and
/// the alert's evidence); nothing overflows; no console error.
#[test]
#[ignore = "needs chromium and poppler-utils (apt-get install chromium poppler-utils); .ci/run runs it"]
fn demo_reports_agree_with_their_alerts_in_a_real_browser() {
    let browser = browser();
    let demo = demo_site();
    let html = std::fs::read_to_string(&demo.last_report).unwrap();
    let date = &demo.fouling_date;
    for width in [1280, 718, 420] {
        let (l, console) = layout(&browser, &html, width);
        assert_fits("the demo's last report", width, &l, &console);
        let note = l.note.clone().expect("the projected date is written on the effectiveness plot");
        let card = l.card.clone().expect("the projected date is in the headline");
        assert!(l.note_visible && l.card_visible, "at {width} px the projected date is not on screen: {l:?}");
        assert!(
            note.starts_with(&format!("limit reached {date}")) && card == *date,
            "alert {date}, plot {note}, headline {card}"
        );
        // The headline shows the alert's latest message, with the same date.
        let fouling = l
            .messages
            .iter()
            .find(|m| m.contains("the heater is fouling"))
            .expect("the fouling alert in the headline");
        assert_eq!(alert_date(fouling).as_deref(), Some(date.as_str()), "{fouling}");
        // The residual plot's baseline and limits are the monitor's.
        assert_limits(&format!("the demo's last report at {width} px"), &l.limits, &demo.limits);
        let baseline = l.limits.iter().find(|(c, _)| c.contains("baseline")).expect("a baseline line").1;
        assert!(
            (baseline - demo.fouling_baseline_k).abs() < 6e-4,
            "plot baseline {baseline}, alert {}",
            demo.fouling_baseline_k
        );
    }
    let message = demo_message(&html);
    // The alert table gives the evidence of that same latest message: its projected range.
    let range = message.split("(between ").nth(1).and_then(|r| r.split(')').next()).expect("a range");
    let row = html.split("<tr id=\"alert-").find(|r| r.contains("heater_fouling")).expect("the alert's row");
    let row = &row[..row.find("</tr>").unwrap()];
    assert!(row.contains(&range.replace(" and ", " to ")), "evidence of another message than {range}: {row}");
    assert_prints(&browser, "the demo's last report", &html, date, &message);
    // The thermometer shift: its baseline line is the alert's baseline too.
    let r = reported();
    let html = std::fs::read_to_string(&r.html).unwrap();
    for width in [1280, 420] {
        let (l, console) = layout(&browser, &html, width);
        assert_fits("the thermometer shift's report", width, &l, &console);
        let baseline = l.limits.iter().find(|(c, _)| c.contains("baseline")).expect("a baseline line").1;
        assert!((baseline - r.baseline_k).abs() < 6e-4, "plot baseline {baseline}, alert {}", r.baseline_k);
        assert_eq!(l.limits.iter().filter(|(c, _)| c.contains("alert-limit")).count(), 2, "{:?}", l.limits);
    }
}

/// The fouling alert's message as the headline of `html` shows it (its text without markup).
fn demo_message(html: &str) -> String {
    let at = html.find("the heater is fouling").expect("the fouling alert's message");
    let start = html[..at].rfind('>').unwrap() + 1;
    let end = at + html[at..].find('<').unwrap();
    html[start..end].replace("&amp;", "&").replace("&#39;", "'").replace("&quot;", "\"")
}

/// The console-error check sees what it is there to see: a page whose script fails.
fn assert_console_check_works(browser: &Path) {
    let dir = tempfile::tempdir().unwrap();
    let page = dir.path().join("bad.html");
    std::fs::write(&page, "<!doctype html><p>x</p><script>no_such_function();</script>").unwrap();
    let out =
        chromium(browser, &dir.path().join("p"), &["--dump-dom"], &format!("file://{}", page.display()));
    assert!(!console_errors(&out.stderr).is_empty(), "a failing script is not seen as a console error");
}

/// The service's live pages in a real browser: the overview and the unit's shift so far at
/// 1280 px and 420 px, and the unit's page printed on A4 and Letter; the live view's projected
/// date equals the alert list's, its plotted limits equal the monitor's (the checkpoint the
/// service writes when it stops); no overflow, no console error (also loaded from the service
/// itself, under its content security policy).
#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
#[ignore = "needs chromium and poppler-utils (apt-get install chromium poppler-utils); .ci/run runs it"]
async fn live_pages_render_in_a_real_browser() {
    let browser = browser();
    assert_console_check_works(&browser);
    let live = live_service().await;
    let addr = live.addr;
    let get = |path: &'static str| tokio::task::spawn_blocking(move || crate::util::http_get(addr, path));
    let (code, alerts) = get("/alerts.json").await.unwrap();
    assert_eq!(code, 200, "{alerts}");
    let alerts: serde_json::Value = serde_json::from_str(&alerts).unwrap();
    let messages: Vec<String> = alerts["units"][0]["active"]
        .as_array()
        .unwrap()
        .iter()
        .filter_map(|a| a["message"].as_str().map(str::to_string))
        .collect();
    let message =
        messages.iter().find(|m| alert_date(m).is_some()).expect("a fouling alert with a projected date");
    let date = alert_date(message).unwrap();
    let (code, unit) = get("/unit/R-204").await.unwrap();
    assert_eq!(code, 200, "{unit}");
    let (code, overview) = get("/").await.unwrap();
    assert_eq!(code, 200, "{overview}");
    assert!(overview.contains("/unit/R-204") && overview.contains("heater_fouling"), "{overview}");
    let mut plotted = Vec::new();
    for width in [1280, 420] {
        let (l, console) = layout(&browser, &unit, width);
        assert_fits("the live view", width, &l, &console);
        assert!(
            l.note_visible
                && l.note.as_deref().is_some_and(|n| n.starts_with(&format!("limit reached {date}"))),
            "at {width} px: alert {date}, {l:?}"
        );
        assert_eq!(l.card.as_deref(), Some(date.as_str()), "the headline's date at {width} px");
        plotted.push(l.limits);
        let (l, console) = layout(&browser, &overview, width);
        assert_fits("the overview", width, &l, &console);
    }
    assert_prints(&browser, "the live view", &unit, &date, message);
    let profile = tempfile::tempdir().unwrap();
    for path in ["/", "/unit/R-204", "/reports/"] {
        let out = chromium(
            &browser,
            profile.path(),
            &["--dump-dom", "--virtual-time-budget=2000"],
            &format!("http://{addr}{path}"),
        );
        let errors = console_errors(&out.stderr);
        assert!(errors.is_empty(), "{path}: {errors:?}");
    }
    // Stopped, the service writes its checkpoint (the folder stays until the end of the test).
    let LiveService { _dir: dir, cfg, running, .. } = live;
    running.stop().await;
    let monitor = monitor_limits(&cfg);
    for (width, limits) in [1280, 420].iter().zip(&plotted) {
        assert_limits(&format!("the live view at {width} px"), limits, &monitor);
    }
    drop(dir);
}

/// The residual plot draws the monitor's baseline (the value in the instrument alert's
/// evidence) and limits around it, and says how the residual is signed.
#[test]
fn the_residual_plot_draws_the_monitors_baseline_and_limits() {
    let r = reported();
    let html = std::fs::read_to_string(&r.html).unwrap();
    let plot =
        &html[html.find("id=\"plot-residual\"").unwrap()..html.find("id=\"plot-effectiveness\"").unwrap()];
    // The wide drawing, and the narrow one (for phones) with the same lines.
    let narrow_at = plot.find("id=\"svg-residual-n\"").expect("a narrow drawing");
    let value_in = |svg: &str, class: &str| -> Vec<f64> {
        svg.split(&format!("class=\"limit {class}\" data-value=\""))
            .skip(1)
            .filter_map(|s| s.split('"').next()?.parse().ok())
            .collect()
    };
    let value = |class: &str| value_in(&plot[..narrow_at], class);
    for class in ["baseline", "alert-limit", "gross-limit"] {
        assert_eq!(value(class), value_in(&plot[narrow_at..], class), "{class} in both drawings");
    }
    let base = value("baseline");
    assert_eq!(base.len(), 1, "one baseline line");
    assert!((base[0] - r.baseline_k).abs() < 6e-4, "plot {} vs alert {}", base[0], r.baseline_k);
    let limits = value("alert-limit");
    assert_eq!(limits.len(), 2);
    assert!(
        (limits[0] - base[0] + (limits[1] - base[0])).abs() < 1e-9,
        "limits symmetric about the baseline: {limits:?}"
    );
    assert!(plot.contains("measured − predicted"), "the residual's sign is stated");
    assert!(html.contains("<meta name=\"viewport\""), "viewport meta");
    assert!(html.contains("@page"), "page rules for print");
    // One word for the alerts' rank: severity (the alert events' field).
    assert!(!html.to_lowercase().contains("priority"), "the report says severity, not priority");
}

/// A shift without data: `report` says so, exits 2 and writes nothing; on a site that has
/// never had data it creates no folder.
#[test]
fn a_shift_without_data_writes_nothing() {
    let r = reported();
    let cfg = r.dir.path().join("site.toml");
    let reports = r.dir.path().join("output/R-204/reports");
    let before = std::fs::read_dir(&reports).unwrap().count();
    let out = Command::new(env!("CARGO_BIN_EXE_efftemp"))
        .args(["report", "--unit", "R-204", "--shift", "2027-01-01T01:00", "--config"])
        .arg(&cfg)
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2), "{}", String::from_utf8_lossy(&out.stderr));
    assert!(
        String::from_utf8_lossy(&out.stderr).contains("no data"),
        "{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert_eq!(std::fs::read_dir(&reports).unwrap().count(), before, "nothing written");
    // A site with no data at all.
    let empty = tempfile::tempdir().unwrap();
    let cfg = empty.path().join("site.toml");
    std::fs::create_dir(empty.path().join("exports")).unwrap();
    std::fs::write(&cfg, efftemp::app::sim::site_config("exports", "state", "output", false, "10m", 60))
        .unwrap();
    let out =
        Command::new(env!("CARGO_BIN_EXE_efftemp")).args(["report", "--config"]).arg(&cfg).output().unwrap();
    assert_eq!(out.status.code(), Some(2), "{}", String::from_utf8_lossy(&out.stderr));
    assert!(!empty.path().join("output").exists(), "no output folder created");
}

/// The service renders its reports from memory: replaying the same exports twice gives the
/// same reports (what was read in each shift is counted as it happened, the same in every
/// run), and every report counts the records read in its shift.
#[test]
fn reports_from_memory_are_the_same_in_every_run_and_count_the_shifts_records() {
    let r = reported();
    let again = tempfile::tempdir().unwrap();
    let cfg = r.dir.path().join("site.toml");
    let text = std::fs::read_to_string(&cfg).unwrap();
    let reports = |root: &Path| -> Vec<(String, efftemp::sinks::report::Extra)> {
        let dir = root.join("output/R-204/reports");
        let mut v: Vec<(String, efftemp::sinks::report::Extra)> = std::fs::read_dir(&dir)
            .unwrap()
            .flatten()
            .map(|e| e.path())
            .filter(|p| p.extension().is_some_and(|x| x == "html"))
            .map(|p| {
                let record = efftemp::sinks::report::read_record(&p).expect("the report carries its record");
                (p.file_name().unwrap().to_string_lossy().into_owned(), record)
            })
            .collect();
        v.sort_by(|a, b| a.0.cmp(&b.0));
        v
    };
    let abs = r.dir.path().display().to_string();
    std::fs::write(
        again.path().join("site.toml"),
        text.replace("\"exports\"", &format!("\"{abs}/exports\"")),
    )
    .unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_efftemp"))
        .args(["replay", "--config"])
        .arg(again.path().join("site.toml"))
        .output()
        .unwrap();
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let (a, b) = (reports(r.dir.path()), reports(again.path()));
    assert!(a.len() >= 4, "{} reports", a.len());
    assert_eq!(a, b, "the same exports give the same report records");
    for (name, extra) in &a {
        let q = &extra.quality;
        assert!(q.records.is_some_and(|n| n > 0) && q.intervals > 0, "{name}: {q:?}");
        assert!(extra.monitor.is_some(), "{name}: the monitor's figures are recorded");
    }
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
