//! Cookies, read and written with the `cookie` crate for both edges: the API reads the session
//! cookie, the pages set it and their own form and flash cookies.

use axum::http::{HeaderMap, header};
use cookie::{Cookie, SameSite};

/// The value of cookie `name` in the request's `Cookie` headers (the first one with that name).
pub fn get(headers: &HeaderMap, name: &str) -> Option<String> {
    headers
        .get_all(header::COOKIE)
        .iter()
        .filter_map(|v| v.to_str().ok())
        .flat_map(Cookie::split_parse)
        .filter_map(Result::ok)
        .find(|c| c.name() == name)
        .map(|c| c.value().to_string())
}

/// Whether the browser reached us over TLS: directly or through a proxy that says so. Trusting
/// the header can only make the cookie stricter, never looser.
pub fn over_tls(headers: &HeaderMap) -> bool {
    headers
        .get("x-forwarded-proto")
        .and_then(|v| v.to_str().ok())
        .is_some_and(|v| v.split(',').next().is_some_and(|p| p.trim() == "https"))
        || headers
            .get("forwarded")
            .and_then(|v| v.to_str().ok())
            .is_some_and(|v| v.to_ascii_lowercase().contains("proto=https"))
}

/// A `Set-Cookie` value: Path=/, HttpOnly and SameSite=Strict always, Secure over TLS.
pub fn set(name: &str, value: &str, max_age_s: i64, headers: &HeaderMap) -> String {
    Cookie::build((name.to_string(), value.to_string()))
        .path("/")
        .max_age(cookie::time::Duration::seconds(max_age_s))
        .http_only(true)
        .same_site(SameSite::Strict)
        .secure(over_tls(headers))
        .build()
        .to_string()
}

#[cfg(test)]
mod tests {
    use super::*;
    use axum::http::HeaderValue;

    #[test]
    fn reads_and_writes() {
        let mut h = HeaderMap::new();
        h.append(
            header::COOKIE,
            HeaderValue::from_static("a=1; gs_session=abc"),
        );
        h.append(header::COOKIE, HeaderValue::from_static("b=2"));
        assert_eq!(get(&h, "gs_session").as_deref(), Some("abc"));
        assert_eq!(get(&h, "b").as_deref(), Some("2"));
        assert_eq!(get(&h, "c"), None);
        let s = set("gs_form", "xyz", 60, &h);
        for part in [
            "gs_form=xyz",
            "Path=/",
            "Max-Age=60",
            "HttpOnly",
            "SameSite=Strict",
        ] {
            assert!(s.contains(part), "{s}");
        }
        assert!(!s.contains("Secure"));
        h.insert("x-forwarded-proto", HeaderValue::from_static("https"));
        assert!(set("a", "b", 0, &h).contains("Secure"));
    }
}
