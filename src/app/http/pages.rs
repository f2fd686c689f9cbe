//! The engineer's read-only pages, rendered from the live board (the units' shift books, in
//! memory) and the report archive on disk.

use std::fmt::Write as _;
use std::sync::{Arc, PoisonError};

use axum::Router;
use axum::extract::{Path, State as Extract};
use axum::http::{StatusCode, header};
use axum::response::{IntoResponse, Response};
use axum::routing::get;
use tokio::sync::watch;

use super::{Pages, Snapshot};
use crate::sinks::report::{OverviewUnit, board, overview_html, render_html};

/// The pages' state.
pub(super) struct State {
    pub(super) pages: Pages,
    pub(super) rx: watch::Receiver<Snapshot>,
}

type Shared = Arc<State>;

/// No scripts, nothing from elsewhere: styles inline, images only inline SVG.
const CSP: &str = "default-src 'none'; style-src 'unsafe-inline'; img-src data:; base-uri 'none'; form-action 'none'; frame-ancestors 'none'";

pub(super) fn router(state: Shared) -> Router {
    Router::new()
        .route("/", get(overview))
        .route("/unit/{name}", get(unit))
        .route("/reports/", get(archive))
        .route("/reports/{unit}/{file}", get(report_file))
        .route("/alerts.json", get(alerts))
        .with_state(state)
}

fn html(status: StatusCode, body: String) -> Response {
    (
        status,
        [
            (header::CONTENT_TYPE, "text/html; charset=utf-8"),
            (header::CONTENT_SECURITY_POLICY, CSP),
            (header::X_CONTENT_TYPE_OPTIONS, "nosniff"),
            (header::CACHE_CONTROL, "no-store"),
        ],
        body,
    )
        .into_response()
}

fn not_found(what: &str) -> Response {
    html(
        StatusCode::NOT_FOUND,
        format!(
            "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"><title>not found</title></head><body><p>{}</p><p><a href=\"/\">overview</a></p></body></html>",
            esc(what)
        ),
    )
}

fn esc(s: &str) -> String {
    s.replace('&', "&amp;").replace('<', "&lt;").replace('>', "&gt;").replace('"', "&quot;")
}

async fn overview(Extract(st): Extract<Shared>) -> Response {
    let snap = st.rx.borrow().clone();
    let units: Vec<OverviewUnit> = board(&st.pages.output_dir)
        .units()
        .into_iter()
        .map(|(name, book)| {
            let b = book.lock().unwrap_or_else(PoisonError::into_inner);
            let u = b.unit();
            let delta_symbol = match u.temperature_unit.symbol {
                "degF" => "°F",
                "degR" => "°R",
                _ => "K",
            };
            OverviewUnit {
                description: u.description.clone(),
                state: b.last_row().and_then(|r| r.state),
                active: b
                    .active()
                    .iter()
                    .map(|a| (a.severity, a.cause.as_str().to_string(), a.subject.clone(), a.message.clone()))
                    .collect(),
                last_ms: b.last_row().map(|r| r.t_ms),
                tz: u.time_zone.clone(),
                recent: b.recent_residuals(240),
                delta_symbol,
                problem: snap.units.iter().find(|s| s.name == name).and_then(|s| s.input_problem.clone()),
                name,
            }
        })
        .collect();
    html(StatusCode::OK, overview_html(&st.pages.site, &units, jiff::Timestamp::now().as_millisecond()))
}

async fn unit(Extract(st): Extract<Shared>, Path(name): Path<String>) -> Response {
    let Some(book) = board(&st.pages.output_dir).unit(&name) else {
        return not_found(&format!("no unit {name} with a live view (shift reports must be on)"));
    };
    let data = book.lock().unwrap_or_else(PoisonError::into_inner).data(true);
    match data {
        Some(d) => html(StatusCode::OK, render_html(&d)),
        None => not_found(&format!("unit {name}: no interval of the current shift yet")),
    }
}

/// A name that is one plain path component.
fn plain(name: &str) -> bool {
    !name.is_empty()
        && name != "."
        && name != ".."
        && name.chars().all(|c| c.is_ascii_alphanumeric() || matches!(c, '-' | '_' | '.'))
}

async fn archive(Extract(st): Extract<Shared>) -> Response {
    let dir = &st.pages.output_dir;
    let mut units: Vec<String> = std::fs::read_dir(dir)
        .map(|r| r.filter_map(|e| e.ok()?.file_name().into_string().ok()).filter(|n| plain(n)).collect())
        .unwrap_or_default();
    units.sort();
    let mut s = String::from(
        "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\"><meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"><title>shift reports</title><style>body{font-family:'DejaVu Sans',Verdana,sans-serif;max-width:900px;margin:0 auto;padding:12px;color:#24323d}li{margin:2px 0}</style></head><body><h1>Shift reports</h1><p><a href=\"/\">overview</a></p>",
    );
    let mut any = false;
    for u in units {
        let mut files: Vec<String> = std::fs::read_dir(dir.join(&u).join("reports"))
            .map(|r| {
                r.filter_map(|e| e.ok()?.file_name().into_string().ok())
                    .filter(|n| n.starts_with("shift-") && n.ends_with(".html") && plain(n))
                    .collect()
            })
            .unwrap_or_default();
        if files.is_empty() {
            continue;
        }
        any = true;
        files.sort_unstable_by(|a, b| b.cmp(a));
        let _ = write!(s, "<h2>{}</h2><ul>", esc(&u));
        for f in files {
            let _ = write!(s, "<li><a href=\"/reports/{0}/{1}\">{1}</a></li>", esc(&u), esc(&f));
        }
        s.push_str("</ul>");
    }
    if !any {
        s.push_str("<p>No shift report written yet.</p>");
    }
    s.push_str("</body></html>");
    html(StatusCode::OK, s)
}

async fn report_file(Extract(st): Extract<Shared>, Path((unit, file)): Path<(String, String)>) -> Response {
    if !plain(&unit) || !plain(&file) || !file.starts_with("shift-") || !file.ends_with(".html") {
        return not_found("no such report");
    }
    let path = st.pages.output_dir.join(&unit).join("reports").join(&file);
    match tokio::fs::read_to_string(&path).await {
        Ok(body) => html(StatusCode::OK, body),
        Err(_) => not_found("no such report"),
    }
}

async fn alerts(Extract(st): Extract<Shared>) -> Response {
    let units: Vec<serde_json::Value> = board(&st.pages.output_dir)
        .units()
        .into_iter()
        .map(|(name, book)| {
            let b = book.lock().unwrap_or_else(PoisonError::into_inner);
            let tz = b.unit().time_zone.clone();
            let active: Vec<serde_json::Value> = b
                .active()
                .iter()
                .map(|a| {
                    serde_json::json!({
                        "alert_id": a.alert_id,
                        "cause": a.cause.as_str(),
                        "subject": a.subject,
                        "severity": a.severity.as_str(),
                        "raised": crate::core::calendar::rfc3339(a.raised_ms, &tz),
                        "shelved": a.shelved,
                        "message": a.message,
                    })
                })
                .collect();
            serde_json::json!({ "unit": name, "active": active })
        })
        .collect();
    let body =
        serde_json::json!({ "site": st.pages.site, "residual_sign": "measured - predicted", "units": units });
    (
        StatusCode::OK,
        [(header::CONTENT_TYPE, "application/json"), (header::CACHE_CONTROL, "no-store")],
        body.to_string(),
    )
        .into_response()
}
