//! The browser workbench: `/` serves the page, `/assets/{file}` its scripts and style sheet.
//! The files under `server/web/` are embedded in the binary, so the service needs nothing
//! beside it and the page works with no internet connection (it loads nothing from elsewhere,
//! which the Content-Security-Policy below also enforces).

use axum::extract::Path;
use axum::http::{header, HeaderName, HeaderValue};
use axum::response::{IntoResponse, Response};
use axum::routing::get;
use axum::Router;

use super::error::ApiError;
use super::AppState;

/// One embedded file of the workbench.
struct Asset {
    name: &'static str,
    content_type: &'static str,
    body: &'static str,
}

const JS: &str = "text/javascript; charset=utf-8";

/// The page itself.
const INDEX: &str = include_str!("../../web/index.html");

/// One [`Asset`] from `server/web/`, embedded under its own file name.
macro_rules! asset {
    ($file:literal, $content_type:expr) => {
        Asset {
            name: $file,
            content_type: $content_type,
            body: include_str!(concat!("../../web/", $file)),
        }
    };
}

/// Everything the page loads from `/assets/`.
const ASSETS: &[Asset] = &[
    asset!("style.css", "text/css; charset=utf-8"),
    asset!("icon.svg", "image/svg+xml"),
    asset!("app.js", JS),
    asset!("api.js", JS),
    asset!("dom.js", JS),
    asset!("colour.js", JS),
    asset!("npy.js", JS),
    asset!("view.js", JS),
    asset!("plot.js", JS),
    asset!("calibrations.js", JS),
    asset!("analysis.js", JS),
    asset!("series.js", JS),
];

/// Only this origin's scripts, styles and API; pictures also from `blob:` (downloads, masks)
/// and `data:`.
const CSP: &str = "default-src 'self'; img-src 'self' blob: data:; script-src 'self'; \
                   style-src 'self'; connect-src 'self'; object-src 'none'; base-uri 'none'; \
                   form-action 'self'; frame-ancestors 'none'";

/// Routes of the browser workbench: `/` and its static assets.
pub fn router() -> Router<AppState> {
    Router::new()
        .route("/", get(index))
        .route("/assets/{file}", get(asset))
}

fn find(name: &str) -> Option<&'static Asset> {
    ASSETS.iter().find(|a| a.name == name)
}

/// Headers every workbench response carries. Assets change only with the binary, so the
/// browser revalidates them instead of keeping stale copies after an upgrade.
fn respond(content_type: &'static str, body: &'static str) -> Response {
    let headers: [(HeaderName, HeaderValue); 3] = [
        (header::CONTENT_TYPE, HeaderValue::from_static(content_type)),
        (header::CACHE_CONTROL, HeaderValue::from_static("no-cache")),
        (
            header::CONTENT_SECURITY_POLICY,
            HeaderValue::from_static(CSP),
        ),
    ];
    (headers, body).into_response()
}

async fn index() -> Response {
    respond("text/html; charset=utf-8", INDEX)
}

async fn asset(Path(file): Path<String>) -> Result<Response, ApiError> {
    let asset = find(&file)
        .ok_or_else(|| ApiError::NotFound(format!("no workbench asset named {file:?}")))?;
    Ok(respond(asset.content_type, asset.body))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Every `/assets/…` path in the page and every module a script imports must be embedded.
    #[test]
    fn every_referenced_asset_is_embedded() {
        let mut referenced = Vec::new();
        for part in INDEX.split("/assets/").skip(1) {
            referenced.push(part.split('"').next().unwrap_or_default().to_string());
        }
        for asset in ASSETS.iter().filter(|a| a.content_type == JS) {
            for part in asset.body.split("from './").skip(1) {
                referenced.push(part.split('\'').next().unwrap_or_default().to_string());
            }
        }
        assert!(
            referenced.len() > ASSETS.len(),
            "too few references found: {referenced:?}"
        );
        for name in &referenced {
            assert!(
                find(name).is_some(),
                "{name} is referenced but not embedded"
            );
        }
        for asset in ASSETS {
            assert!(
                referenced.iter().any(|r| r == asset.name),
                "{} is embedded but nothing loads it",
                asset.name
            );
        }
    }

    /// The page must work offline: nothing may be loaded from another host. (The icon is left
    /// out: its only address is the SVG namespace, which names and loads nothing.)
    #[test]
    fn nothing_is_loaded_from_elsewhere() {
        let code = ASSETS
            .iter()
            .filter(|a| a.name != "icon.svg")
            .map(|a| a.body);
        for text in std::iter::once(INDEX).chain(code) {
            for needle in ["http://", "https://", "//cdn", "@import", "url("] {
                assert!(
                    !text.contains(needle),
                    "found {needle:?} in a workbench file"
                );
            }
        }
    }
}
