//! The one wrapper every page goes through: the shared chrome (who is signed in, the team, the
//! CSRF token, a flash message) and turning a template into a response.

use super::session::Signed;
use crate::service::auth::Role;
use askama::Template;
use axum::http::{HeaderMap, HeaderValue, StatusCode, header};
use axum::response::{Html, IntoResponse, Response};

/// Cookie carrying a one-shot message across a post/redirect/get.
pub const FLASH_COOKIE: &str = "gs_flash";

/// A one-shot message shown at the top of the next page.
#[derive(Debug, Clone)]
pub struct Flash {
    /// The sentence shown.
    pub text: String,
    /// An error (rather than a confirmation).
    pub error: bool,
}

/// A team the signed-in person can switch to.
#[derive(Debug, Clone)]
pub struct TeamChoice {
    /// Team id.
    pub id: String,
    /// Team name.
    pub name: String,
}

/// What the page frame shows around every page.
#[derive(Debug, Clone, Default)]
pub struct Chrome {
    /// Whether someone is signed in.
    pub signed: bool,
    /// Their display name.
    pub display_name: String,
    /// Their team.
    pub team_name: String,
    /// Their team id.
    pub team_id: String,
    /// Their role in it.
    pub role: Role,
    /// The session's CSRF token, for forms and `fetch`.
    pub csrf: String,
    /// Other teams they belong to.
    pub teams: Vec<TeamChoice>,
    /// Which part of the site this page belongs to (for the navigation highlight).
    pub section: &'static str,
    /// A message carried over from the previous request.
    pub flash: Option<Flash>,
    /// Whether the page must also clear the flash cookie.
    clear_flash: bool,
}

impl Chrome {
    /// The frame for a page nobody needs to be signed in for.
    pub fn anonymous(headers: &HeaderMap) -> Self {
        let flash = read_flash(headers);
        Chrome {
            clear_flash: flash.is_some(),
            flash,
            ..Default::default()
        }
    }

    /// The frame for a signed-in person.
    pub async fn signed(
        state: &crate::service::AppState,
        signed: &Signed,
        headers: &HeaderMap,
        section: &'static str,
    ) -> Self {
        let teams = crate::service::accounts::teams_of(state, &signed.info.person_id)
            .await
            .unwrap_or_default()
            .into_iter()
            .map(|m| TeamChoice {
                id: m.team_id,
                name: m.team_name,
            })
            .collect();
        let flash = read_flash(headers);
        Chrome {
            signed: true,
            display_name: signed.info.display_name.clone(),
            team_name: signed.info.team_name.clone(),
            team_id: signed.info.team_id.clone(),
            role: signed.info.role,
            csrf: signed.info.csrf_token.clone(),
            teams,
            section,
            clear_flash: flash.is_some(),
            flash,
        }
    }

    /// Whether the person is an owner (the team page is theirs).
    pub fn is_owner(&self) -> bool {
        self.role >= Role::Owner
    }
    /// Whether the person may edit.
    pub fn can_edit(&self) -> bool {
        self.role >= Role::Editor
    }
    /// The navigation class of a section link.
    pub fn here(&self, section: &str) -> &'static str {
        if self.section == section { "here" } else { "" }
    }
}

fn read_flash(headers: &HeaderMap) -> Option<Flash> {
    let raw = crate::cookies::get(headers, FLASH_COOKIE)?;
    let (kind, text) = raw.split_once(':')?;
    let text = percent_encoding::percent_decode_str(text)
        .decode_utf8_lossy()
        .into_owned();
    if text.is_empty() {
        return None;
    }
    Some(Flash {
        text,
        error: kind == "e",
    })
}

/// A page template with its frame.
pub trait Page: Template {
    /// The frame it is shown in.
    fn chrome(&self) -> &Chrome;
}

/// Renders a page with a status; pages never cache (they show live team state and secrets).
pub fn render<T: Page>(status: StatusCode, page: &T) -> Response {
    match page.render() {
        Ok(html) => {
            let mut resp = (status, Html(html)).into_response();
            let h = resp.headers_mut();
            h.insert(header::CACHE_CONTROL, HeaderValue::from_static("no-store"));
            // The pages load only our own scripts and styles; frames and previews are blob: or
            // same-origin images. Inline scripts are never used, so none can be injected.
            h.insert(
                header::CONTENT_SECURITY_POLICY,
                HeaderValue::from_static(
                    "default-src 'self'; img-src 'self' blob: data:; script-src 'self'; \
                     style-src 'self'; object-src 'none'; base-uri 'none'; frame-ancestors 'none'; \
                     form-action 'self'",
                ),
            );
            h.insert(
                header::X_CONTENT_TYPE_OPTIONS,
                HeaderValue::from_static("nosniff"),
            );
            h.insert(
                header::REFERRER_POLICY,
                HeaderValue::from_static("same-origin"),
            );
            if page.chrome().clear_flash
                && let Ok(v) = HeaderValue::from_str(&format!(
                    "{FLASH_COOKIE}=; Path=/; Max-Age=0; HttpOnly; SameSite=Strict"
                ))
            {
                h.append(header::SET_COOKIE, v);
            }
            resp
        }
        Err(e) => {
            tracing::error!(error = %e, "template failed");
            (
                StatusCode::INTERNAL_SERVER_ERROR,
                Html("<!doctype html><title>Error</title><p>The page could not be drawn; it has been logged.</p>".to_string()),
            )
                .into_response()
        }
    }
}

/// 200 page.
pub fn ok<T: Page>(page: &T) -> Response {
    render(StatusCode::OK, page)
}

/// A 303 to `location` carrying a one-shot message (post/redirect/get).
pub fn redirect_flash(location: &str, text: &str, error: bool, headers: &HeaderMap) -> Response {
    let mut resp = StatusCode::SEE_OTHER.into_response();
    if let Ok(v) = HeaderValue::from_str(location) {
        resp.headers_mut().insert(header::LOCATION, v);
    }
    let value = format!(
        "{}:{}",
        if error { "e" } else { "i" },
        super::error::percent_encode(text)
    );
    if let Ok(v) = HeaderValue::from_str(&crate::cookies::set(FLASH_COOKIE, &value, 60, headers)) {
        resp.headers_mut().append(header::SET_COOKIE, v);
    }
    resp
}

/// A plain 303.
pub fn redirect(location: &str) -> Response {
    let mut resp = StatusCode::SEE_OTHER.into_response();
    if let Ok(v) = HeaderValue::from_str(location) {
        resp.headers_mut().insert(header::LOCATION, v);
    }
    resp
}

/// The error page.
#[derive(Template)]
#[template(path = "error.html")]
pub struct ErrorPage {
    /// No chrome: an error page must render even when the session lookup failed.
    pub chrome: Chrome,
    /// HTTP status code.
    pub status: u16,
    /// Short heading.
    pub title: &'static str,
    /// The sentence for a person.
    pub message: String,
}

impl Page for ErrorPage {
    fn chrome(&self) -> &Chrome {
        &self.chrome
    }
}

/// Implements [`Page`] for a template struct with a `chrome` field.
macro_rules! page {
    ($($t:ty),* $(,)?) => {
        $(impl $crate::pages::render::Page for $t {
            fn chrome(&self) -> &$crate::pages::render::Chrome {
                &self.chrome
            }
        })*
    };
}
pub(crate) use page;

/// Unix ms as a short UTC time for people ("2026-12-01 14:03 UTC").
pub fn when(ms: i64) -> String {
    let t = time::OffsetDateTime::from_unix_timestamp_nanos(i128::from(ms) * 1_000_000)
        .unwrap_or(time::OffsetDateTime::UNIX_EPOCH);
    let f = time::macros::format_description!("[year]-[month]-[day] [hour]:[minute] UTC");
    t.format(&f).unwrap_or_default()
}
