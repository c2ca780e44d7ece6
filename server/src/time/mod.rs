//! Instants as integer milliseconds since the Unix epoch (UTC), the one time
//! representation in the store and in the domain code.

pub mod day;

use chrono::{DateTime, SecondsFormat, TimeZone, Utc};
use serde::{Deserialize, Deserializer, Serialize, Serializer};
use std::fmt;

/// Milliseconds in 24 hours: a span, not a day at a site (a local day can be 23 or 25
/// hours long; `day::SiteZone` turns days into instants).
pub const DAY_MS: i64 = 86_400_000;

/// One instant, in milliseconds since 1970-01-01T00:00:00Z.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub struct Timestamp(pub i64);

impl Timestamp {
    /// Reads the server's clock.
    pub fn now() -> Self {
        Self(Utc::now().timestamp_millis())
    }

    /// Parses an RFC 3339 instant such as `2026-03-01T08:15:00Z` or with an offset.
    pub fn parse_rfc3339(text: &str) -> Result<Self, String> {
        DateTime::parse_from_rfc3339(text.trim())
            .map(|t| Self(t.timestamp_millis()))
            .map_err(|e| {
                format!("'{text}' is not an RFC 3339 instant ({e}), e.g. 2026-03-01T08:15:00Z")
            })
    }

    /// Converts to a chrono UTC instant.
    pub fn to_utc(self) -> DateTime<Utc> {
        Utc.timestamp_millis_opt(self.0)
            .single()
            .unwrap_or(DateTime::<Utc>::MIN_UTC)
    }

    /// Adds a number of milliseconds, saturating at the ends of the range.
    pub fn plus_ms(self, ms: i64) -> Self {
        Self(self.0.saturating_add(ms))
    }
}

impl fmt::Display for Timestamp {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.to_utc().to_rfc3339_opts(SecondsFormat::Millis, true))
    }
}

impl Serialize for Timestamp {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.collect_str(self)
    }
}

impl<'de> Deserialize<'de> for Timestamp {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        let text = String::deserialize(d)?;
        Self::parse_rfc3339(&text).map_err(serde::de::Error::custom)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rfc3339_round_trips_with_milliseconds() {
        let t = Timestamp::parse_rfc3339("2026-03-01T08:15:00.250+01:00").unwrap();
        assert_eq!(t.to_string(), "2026-03-01T07:15:00.250Z");
        assert_eq!(Timestamp::parse_rfc3339(&t.to_string()).unwrap(), t);
    }

    #[test]
    fn a_date_without_time_is_refused_with_an_example() {
        let e = Timestamp::parse_rfc3339("2026-03-01").unwrap_err();
        assert!(e.contains("e.g. 2026-03-01T08:15:00Z"), "{e}");
    }
}
