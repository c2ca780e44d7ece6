//! What the browser is told about every answer (content security policy,
//! no MIME sniffing, no framing, no referrer outside the site), and the
//! same-origin check of page forms.
//!
//! Pages and the phone app run no inline script or style, so the policy
//! allows scripts and styles from the site's own files only; the phone app's
//! pages also compile WebAssembly, hence `'wasm-unsafe-eval'` there alone.

use axum::extract::Request;
use axum::http::{HeaderMap, HeaderValue, header};
use axum::middleware::Next;
use axum::response::Response;

/// The content security policy of server pages and JSON answers.
pub const PAGE_CSP: &str = "default-src 'none'; script-src 'self'; style-src 'self'; \
     img-src 'self'; connect-src 'self'; form-action 'self'; frame-ancestors 'none'; \
     base-uri 'none'";
/// The content security policy of the phone app under `/app/` (it loads its
/// scanner as WebAssembly, registers a service worker and has a manifest).
pub const APP_CSP: &str = "default-src 'none'; script-src 'self' 'wasm-unsafe-eval'; \
     style-src 'self'; img-src 'self'; connect-src 'self'; worker-src 'self'; \
     manifest-src 'self'; form-action 'self'; frame-ancestors 'none'; base-uri 'none'";
/// What the site sends as `Referer`: its own pages only, never other sites.
pub const REFERRER_POLICY: &str = "same-origin";
/// Where the phone app is served.
const APP_PREFIX: &str = "/app/";

/// Adds the security headers to every answer (keeping any a handler set).
pub async fn security_headers(req: Request, next: Next) -> Response {
    let app = req.uri().path().starts_with(APP_PREFIX);
    let mut response = next.run(req).await;
    let h = response.headers_mut();
    let csp = if app { APP_CSP } else { PAGE_CSP };
    for (name, value) in [
        (header::CONTENT_SECURITY_POLICY, csp),
        (header::X_CONTENT_TYPE_OPTIONS, "nosniff"),
        // For browsers older than `frame-ancestors`.
        (header::X_FRAME_OPTIONS, "DENY"),
        (header::REFERRER_POLICY, REFERRER_POLICY),
    ] {
        h.entry(name).or_insert(HeaderValue::from_static(value));
    }
    response
}

/// What a form sent from another site is told.
pub const FOREIGN_FORM_TEXT: &str =
    "This form was sent from another site, so it was refused. Open Cairn itself and try again.";

/// Tells whether a state-changing page request came from Cairn's own pages.
///
/// `Sec-Fetch-Site`, when sent, must say `same-origin` (or `none`: typed or
/// bookmarked by the user). `Origin`, when sent, must name this host (as the
/// `Host` header gives it; a proxy in front must pass `Host` through). A
/// request with neither header comes from an old browser or a program, not
/// from a current browser on another site, which always sends at least one
/// on a cross-site POST; it is let through, and the form token still decides.
pub fn same_origin(headers: &HeaderMap) -> bool {
    if let Some(site) = headers.get("sec-fetch-site")
        && !matches!(site.as_bytes(), b"same-origin" | b"none")
    {
        return false;
    }
    let Some(origin) = headers.get(header::ORIGIN) else {
        return true;
    };
    let (Some(origin), Some(host)) = (
        origin.to_str().ok(),
        headers.get(header::HOST).and_then(|h| h.to_str().ok()),
    ) else {
        return false;
    };
    let Some((scheme, authority)) = origin.split_once("://") else {
        // `null` (a sandboxed or privacy-sensitive context) or nonsense.
        return false;
    };
    let default_port = match scheme {
        "https" => ":443",
        "http" => ":80",
        _ => return false,
    };
    let strip = |a: &str| -> String {
        a.strip_suffix(default_port)
            .unwrap_or(a)
            .to_ascii_lowercase()
    };
    !authority.contains('/') && strip(authority) == strip(host)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn headers(pairs: &[(&'static str, &'static str)]) -> HeaderMap {
        let mut h = HeaderMap::new();
        for (k, v) in pairs {
            h.insert(*k, HeaderValue::from_static(v));
        }
        h
    }

    #[test]
    fn a_form_from_the_same_host_passes_and_one_from_elsewhere_does_not() {
        let cases: &[(&[(&str, &str)], bool)] = &[
            (
                &[("host", "cairn.test"), ("origin", "https://cairn.test")],
                true,
            ),
            (
                &[
                    ("host", "cairn.test:8080"),
                    ("origin", "http://cairn.test:8080"),
                ],
                true,
            ),
            (
                &[("host", "CAIRN.test"), ("origin", "https://cairn.test:443")],
                true,
            ),
            (
                &[("host", "cairn.test"), ("origin", "https://evil.test")],
                false,
            ),
            (
                &[
                    ("host", "cairn.test"),
                    ("origin", "https://cairn.test:8443"),
                ],
                false,
            ),
            (
                &[
                    ("host", "cairn.test"),
                    ("origin", "https://cairn.test.evil.test"),
                ],
                false,
            ),
            (&[("host", "cairn.test"), ("origin", "null")], false),
            (&[("origin", "https://cairn.test")], false),
            (
                &[("host", "cairn.test"), ("sec-fetch-site", "cross-site")],
                false,
            ),
            (
                &[("host", "cairn.test"), ("sec-fetch-site", "same-site")],
                false,
            ),
            (
                &[
                    ("host", "cairn.test"),
                    ("origin", "https://cairn.test"),
                    ("sec-fetch-site", "cross-site"),
                ],
                false,
            ),
            (
                &[("host", "cairn.test"), ("sec-fetch-site", "same-origin")],
                true,
            ),
            (&[("host", "cairn.test"), ("sec-fetch-site", "none")], true),
            // Neither header: an old browser or a program; the form token decides.
            (&[("host", "cairn.test")], true),
        ];
        for (pairs, expected) in cases {
            assert_eq!(same_origin(&headers(pairs)), *expected, "{pairs:?}");
        }
    }
}
