//! Web sessions: the cookie, its time-outs and the pre-session form token of
//! the sign-in page. The session id is random; the server keeps only its
//! SHA-256 digest, so a copy of the database opens no session.

use crate::time::Timestamp;
use axum_extra::extract::cookie::{Cookie, SameSite};

/// The session cookie's name.
pub const SESSION_COOKIE: &str = "cairn_session";
/// The sign-in form's pre-session cookie (double-submit token before a session exists).
pub const FORM_COOKIE: &str = "cairn_form";
/// A session unused this long ends, in milliseconds (30 minutes).
pub const SESSION_IDLE_TIMEOUT_MS: i64 = 30 * 60 * 1000;
/// A session ends this long after sign-in however busy, in milliseconds (12 hours: a long shift).
pub const SESSION_ABSOLUTE_TIMEOUT_MS: i64 = 12 * 60 * 60 * 1000;
/// The idle clock of a session or a device is written at most this often, in milliseconds.
pub const TOUCH_INTERVAL_MS: i64 = 60 * 1000;

/// Tells whether a session started at `created` and last used at `last_seen` has ended by `now`.
pub fn expired(created: Timestamp, last_seen: Timestamp, now: Timestamp) -> bool {
    now.0 - last_seen.0 > SESSION_IDLE_TIMEOUT_MS || now.0 - created.0 > SESSION_ABSOLUTE_TIMEOUT_MS
}

/// Tells whether a last-seen clock is stale enough to write again.
pub fn due_for_touch(last_seen: Timestamp, now: Timestamp) -> bool {
    now.0 - last_seen.0 >= TOUCH_INTERVAL_MS
}

/// Builds a cookie that is HttpOnly, SameSite=Strict, scoped to the whole
/// site, and `Secure` when the server is configured for HTTPS.
pub fn cookie(name: &'static str, value: String, secure: bool) -> Cookie<'static> {
    Cookie::build((name, value))
        .http_only(true)
        .same_site(SameSite::Strict)
        .secure(secure)
        .path("/")
        .build()
}

/// Builds the cookie that deletes `name` in the browser.
pub fn removal(name: &'static str, secure: bool) -> Cookie<'static> {
    let mut c = cookie(name, String::new(), secure);
    c.make_removal();
    c
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_session_ends_when_idle_or_when_old_enough() {
        let t0 = Timestamp(1_000_000_000);
        assert!(!expired(t0, t0, t0.plus_ms(SESSION_IDLE_TIMEOUT_MS)));
        assert!(expired(t0, t0, t0.plus_ms(SESSION_IDLE_TIMEOUT_MS + 1)));
        let busy = t0.plus_ms(SESSION_ABSOLUTE_TIMEOUT_MS);
        assert!(!expired(t0, busy, busy));
        assert!(expired(t0, busy.plus_ms(1), busy.plus_ms(1)));
    }

    #[test]
    fn the_cookie_is_http_only_strict_and_secure_when_asked() {
        let text = cookie(SESSION_COOKIE, "v".into(), true).to_string();
        assert!(text.contains("HttpOnly"), "{text}");
        assert!(text.contains("SameSite=Strict"), "{text}");
        assert!(text.contains("Secure"), "{text}");
        assert!(
            !cookie(SESSION_COOKIE, "v".into(), false)
                .to_string()
                .contains("Secure")
        );
    }
}
