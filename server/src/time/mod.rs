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
    /// A fraction finer than a millisecond is refused, not cut: the ledger keeps
    /// milliseconds, and two instants a sender tells apart must not become one.
    pub fn parse_rfc3339(text: &str) -> Result<Self, String> {
        let t = DateTime::parse_from_rfc3339(text.trim()).map_err(|e| {
            format!("'{text}' is not an RFC 3339 instant ({e}), e.g. 2026-03-01T08:15:00Z")
        })?;
        if t.timestamp_subsec_nanos() % 1_000_000 != 0 {
            return Err(format!(
                "'{text}' is finer than a millisecond; send at most three fraction digits, \
                 e.g. 2026-03-01T08:15:00.123Z"
            ));
        }
        Ok(Self(t.timestamp_millis()))
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

/// How an instant reads on the wire, for the API's document.
pub const INSTANT_WIRE_RULE: &str = "An instant: RFC 3339 in UTC with exactly three fraction digits \
and `Z` when Cairn writes it (`2026-03-02T08:15:00.000Z`). Cairn reads any RFC 3339 offset and \
from zero to three fraction digits; a finer fraction (a part of a millisecond) is refused, \
never cut.";

impl utoipa::PartialSchema for Timestamp {
    fn schema() -> utoipa::openapi::RefOr<utoipa::openapi::schema::Schema> {
        use utoipa::openapi::schema::{ObjectBuilder, Type};
        ObjectBuilder::new()
            .schema_type(Type::String)
            .format(Some(utoipa::openapi::SchemaFormat::KnownFormat(
                utoipa::openapi::KnownFormat::DateTime,
            )))
            .description(Some(INSTANT_WIRE_RULE))
            .examples(["2026-03-02T08:15:00.000Z"])
            .into()
    }
}

impl utoipa::ToSchema for Timestamp {}

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

    #[test]
    fn a_fraction_finer_than_a_millisecond_is_refused_not_cut() {
        let e = Timestamp::parse_rfc3339("2026-03-01T08:15:00.1234Z").unwrap_err();
        assert!(e.contains("finer than a millisecond"), "{e}");
        assert!(Timestamp::parse_rfc3339("2026-03-01T08:15:00.123999999Z").is_err());
        // Trailing zeros say nothing finer: 9 digits ending in six zeros is a millisecond.
        let t = Timestamp::parse_rfc3339("2026-03-01T08:15:00.123000000Z").unwrap();
        assert_eq!(t.to_string(), "2026-03-01T08:15:00.123Z");
        let t = Timestamp::parse_rfc3339("2026-03-01T08:15:00.5Z").unwrap();
        assert_eq!(t.to_string(), "2026-03-01T08:15:00.500Z");
    }
}
