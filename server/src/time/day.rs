//! A site's day (DESIGN.md §7): the one place where an instant becomes a local date at a
//! site and a local date becomes the instants it spans. No I/O.
//!
//! A site keeps an IANA zone name; [`SiteZone::parse`] reads it once into a typed value
//! backed by the tz database compiled into the binary (chrono-tz), so a site's days and
//! its daylight-saving nights never depend on the host's zone files. A local day is
//! `[start, end)` in instants: 24 hours most days, 23 on a spring-forward night, 25 on a
//! fall-back night, and it starts at the first instant whose local date is that day (on
//! the few zones whose clocks skip midnight itself, that is the end of the gap).

use super::Timestamp;
use chrono::{NaiveDate, NaiveDateTime, NaiveTime, TimeZone, Utc};
use chrono_tz::Tz;
use std::fmt;
use std::str::FromStr;

/// Longest gap a zone's clocks skip at a transition, in minutes: no zone in the tz
/// database skips more than a day, so the search for a day's first instant ends.
const MAX_GAP_MINUTES: i64 = 24 * 60;
/// Longest zone name accepted, in bytes (the tz database's longest is about 30).
const MAX_ZONE_NAME_BYTES: usize = 64;

/// A site's time zone, read from the tz database.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct SiteZone(Tz);

impl utoipa::PartialSchema for SiteZone {
    fn schema() -> utoipa::openapi::RefOr<utoipa::openapi::schema::Schema> {
        utoipa::openapi::schema::ObjectBuilder::new()
            .schema_type(utoipa::openapi::schema::Type::String)
            .description(Some(
                "An IANA time zone name (`Europe/London`): the site's local days are its days.",
            ))
            .examples(["Europe/London"])
            .into()
    }
}

impl utoipa::ToSchema for SiteZone {}

/// Why a zone name was refused; the message names the accepted form.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error(
    "time zone '{given}' {why}: give an IANA zone name such as Europe/Berlin, \
     America/Chicago or Asia/Kathmandu, or UTC"
)]
pub struct ZoneError {
    given: String,
    why: &'static str,
}

impl SiteZone {
    /// The zone of a site that keeps UTC days.
    pub const UTC: SiteZone = SiteZone(Tz::UTC);

    /// Reads an IANA zone name. Offsets ("+05:30"), POSIX rules ("EST5EDT") and the
    /// `Etc/GMT±N` zones (whose signs run backwards) are refused: a site names the place
    /// whose clocks it keeps, so its daylight-saving rules come with it.
    pub fn parse(text: &str) -> Result<Self, ZoneError> {
        let given = text.trim();
        let refuse = |why| ZoneError {
            given: text.chars().take(MAX_ZONE_NAME_BYTES).collect(),
            why,
        };
        if given.is_empty() {
            return Err(refuse("is empty"));
        }
        if given.len() > MAX_ZONE_NAME_BYTES {
            return Err(refuse("is too long"));
        }
        if given == "UTC" || given == "Etc/UTC" {
            return Ok(Self::UTC);
        }
        if !given.contains('/') || given.starts_with("Etc/") {
            return Err(refuse("is not a place's zone"));
        }
        Tz::from_str(given)
            .map(SiteZone)
            .map_err(|_| refuse("is not in the tz database"))
    }

    /// Returns the zone's name as the tz database spells it.
    pub fn name(&self) -> &'static str {
        self.0.name()
    }

    /// Returns the local date at this site at instant `at`.
    pub fn day_of(&self, at: Timestamp) -> NaiveDate {
        at.to_utc().with_timezone(&self.0).date_naive()
    }

    /// Returns today's local date at this site.
    pub fn today(&self) -> NaiveDate {
        self.day_of(Timestamp::now())
    }

    /// Returns the first instant whose local date at this site is `day`.
    pub fn start_of(&self, day: NaiveDate) -> Timestamp {
        self.first_at(NaiveDateTime::new(day, NaiveTime::MIN))
    }

    /// Returns the first instant at or after `hour`:00 local time on `day` (on a night
    /// whose clocks skip that hour, the end of the gap; on one that repeats it, the first).
    pub fn at_local(&self, day: NaiveDate, hour: u32) -> Timestamp {
        let time = NaiveTime::from_hms_opt(hour.min(23), 0, 0).unwrap_or(NaiveTime::MIN);
        self.first_at(NaiveDateTime::new(day, time))
    }

    /// Returns the first instant at or after local time `local`: an ambiguous time takes
    /// the earlier instant, a time in a gap the first local minute after the gap.
    fn first_at(&self, local: NaiveDateTime) -> Timestamp {
        for minute in 0..=MAX_GAP_MINUTES {
            let t = local + chrono::Duration::minutes(minute);
            if let Some(at) = self.0.from_local_datetime(&t).earliest() {
                return Timestamp(at.with_timezone(&Utc).timestamp_millis());
            }
        }
        unreachable!("no zone skips more than MAX_GAP_MINUTES of local time")
    }

    /// Returns the instants `[start, end)` of local day `day` at this site.
    pub fn range(&self, day: NaiveDate) -> (Timestamp, Timestamp) {
        let next = day.succ_opt().unwrap_or(NaiveDate::MAX);
        (self.start_of(day), self.start_of(next))
    }

    /// Returns the zone's abbreviation in effect at `at` (CET, CDT, +0545), for pages.
    pub fn abbreviation(&self, at: Timestamp) -> String {
        at.to_utc().with_timezone(&self.0).format("%Z").to_string()
    }

    /// Writes instant `at` for people as the site's clocks showed it, with the zone's
    /// abbreviation: `2026-03-08 01:59:59 CST`. Pages use this; the API keeps UTC.
    pub fn local_time(&self, at: &Timestamp) -> String {
        at.to_utc()
            .with_timezone(&self.0)
            .format("%Y-%m-%d %H:%M:%S %Z")
            .to_string()
    }

    /// Writes the local time of day at `at`, `HH:MM:SS`, for axis labels whose zone is
    /// named once beside them.
    pub fn clock(&self, at: &Timestamp) -> String {
        at.to_utc()
            .with_timezone(&self.0)
            .format("%H:%M:%S")
            .to_string()
    }
}

impl serde::Serialize for SiteZone {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_str(self.name())
    }
}

impl fmt::Display for SiteZone {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// A job that runs once per local day at a site, at a local hour (the nightly ABC run).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Daily {
    pub zone: SiteZone,
    pub hour: u32,
    /// The last local day the job ran for, if it ran.
    pub done: Option<NaiveDate>,
}

impl Daily {
    /// Returns the job as a scheduler starting at `now` holds it: a day whose hour has
    /// passed already counts as done (as if the process had been up then), so a restart
    /// never runs a missed night's job in the middle of the working day.
    pub fn starting(zone: SiteZone, hour: u32, now: Timestamp) -> Self {
        let today = zone.day_of(now);
        let done = if now >= zone.at_local(today, hour) {
            Some(today)
        } else {
            today.pred_opt()
        };
        Self { zone, hour, done }
    }

    /// Returns the local day the job should run for at `now`: today's, once its hour has
    /// come and it has not run for today. A job never runs twice for one local day, and
    /// runs on a night whose clocks skip or repeat its hour too.
    pub fn due(&self, now: Timestamp) -> Option<NaiveDate> {
        let today = self.zone.day_of(now);
        let not_yet = self.done.is_some_and(|d| d >= today);
        (!not_yet && now >= self.zone.at_local(today, self.hour)).then_some(today)
    }

    /// Returns the next instant after `now` at which [`Daily::due`] may say yes.
    pub fn next_at(&self, now: Timestamp) -> Timestamp {
        let today = self.zone.day_of(now);
        let at = self.zone.at_local(today, self.hour);
        if self.due(now).is_some() {
            return now;
        }
        if at > now && self.done.is_none_or(|d| d < today) {
            return at;
        }
        let tomorrow = today.succ_opt().unwrap_or(NaiveDate::MAX);
        self.zone.at_local(tomorrow, self.hour)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use chrono::Datelike;
    use proptest::prelude::*;

    fn zone(name: &str) -> SiteZone {
        SiteZone::parse(name).unwrap()
    }

    fn date(y: i32, m: u32, d: u32) -> NaiveDate {
        NaiveDate::from_ymd_opt(y, m, d).unwrap()
    }

    fn utc(text: &str) -> Timestamp {
        Timestamp::parse_rfc3339(text).unwrap()
    }

    #[test]
    fn zone_names_are_read_and_offsets_rules_and_nonsense_are_refused() {
        assert_eq!(zone("America/Chicago").name(), "America/Chicago");
        assert_eq!(zone(" UTC ").name(), "UTC");
        assert_eq!(zone("Etc/UTC"), SiteZone::UTC);
        for bad in [
            "",
            "  ",
            "+05:30",
            "EST5EDT",
            "Etc/GMT+5",
            "Mars/Olympus_Mons",
            "CET",
        ] {
            let e = SiteZone::parse(bad).unwrap_err().to_string();
            assert!(
                e.contains("IANA zone name such as Europe/Berlin"),
                "{bad}: {e}"
            );
        }
        let long = "A/".repeat(100);
        assert!(
            SiteZone::parse(&long)
                .unwrap_err()
                .to_string()
                .contains("too long")
        );
    }

    #[test]
    fn chicago_has_a_23_hour_day_in_march_and_a_25_hour_day_in_november() {
        // US daylight saving 2026: from 2026-03-08 02:00 CST to 2026-11-01 02:00 CDT (the
        // second Sunday of March and the first of November, US Energy Policy Act of 2005).
        // Every boundary below was checked against Python 3.11's zoneinfo (an independent
        // reader of the system's tz database) on 2026-12-04.
        let z = zone("America/Chicago");
        let hours = |d: NaiveDate| {
            let (start, end) = z.range(d);
            (end.0 - start.0) as f64 / 3_600_000.0
        };
        assert_eq!(hours(date(2026, 3, 8)), 23.0);
        assert_eq!(z.range(date(2026, 3, 8)).0, utc("2026-03-08T06:00:00Z"));
        assert_eq!(z.range(date(2026, 3, 8)).1, utc("2026-03-09T05:00:00Z"));
        assert_eq!(hours(date(2026, 11, 1)), 25.0);
        assert_eq!(z.range(date(2026, 11, 1)).0, utc("2026-11-01T05:00:00Z"));
        assert_eq!(z.range(date(2026, 11, 1)).1, utc("2026-11-02T06:00:00Z"));
        assert_eq!(hours(date(2026, 6, 1)), 24.0);
        // A count at 23:30 local on the fall-back day is on that day, not the next UTC one.
        let late = utc("2026-11-02T05:30:00Z");
        assert_eq!(z.day_of(late), date(2026, 11, 1));
        assert_eq!(z.abbreviation(utc("2026-07-01T12:00:00Z")), "CDT");
        assert_eq!(z.abbreviation(utc("2026-12-01T12:00:00Z")), "CST");
        // The last second before the spring-forward jump and the first after it
        // (tz database: 2026-03-08 02:00 CST becomes 03:00 CDT).
        assert_eq!(
            z.local_time(&utc("2026-03-08T07:59:59Z")),
            "2026-03-08 01:59:59 CST"
        );
        assert_eq!(
            z.local_time(&utc("2026-03-08T08:00:00Z")),
            "2026-03-08 03:00:00 CDT"
        );
        // The repeated hour on the fall-back night reads twice, told apart by its zone.
        assert_eq!(
            z.local_time(&utc("2026-11-01T06:30:00Z")),
            "2026-11-01 01:30:00 CDT"
        );
        assert_eq!(
            z.local_time(&utc("2026-11-01T07:30:00Z")),
            "2026-11-01 01:30:00 CST"
        );
        assert_eq!(z.clock(&utc("2026-11-01T07:30:00Z")), "01:30:00");
    }

    #[test]
    fn half_and_three_quarter_hour_offsets_keep_their_minutes() {
        // Asia/Kathmandu is UTC+05:45 and Asia/Kolkata UTC+05:30 all year (tz database;
        // the day starts checked against Python 3.11's zoneinfo).
        let k = zone("Asia/Kathmandu");
        // 18:14:59Z is 23:59:59 local, 18:15Z midnight: an offset of 05:45.
        assert_eq!(k.day_of(utc("2026-12-06T18:14:59Z")), date(2026, 12, 6));
        assert_eq!(k.range(date(2026, 12, 7)).0, utc("2026-12-06T18:15:00Z"));
        let i = zone("Asia/Kolkata");
        assert_eq!(i.range(date(2026, 12, 7)).0, utc("2026-12-06T18:30:00Z"));
        // A Monday at 03:00 local in Kathmandu is still Sunday in UTC; its week starts
        // on that local Monday.
        let monday_early = utc("2026-12-06T21:15:00Z");
        let d = k.day_of(monday_early);
        assert_eq!(d, date(2026, 12, 7));
        assert_eq!(
            d.weekday(),
            chrono::Weekday::Mon,
            "the local day starts an ISO week"
        );
    }

    #[test]
    fn kiritimati_and_pago_pago_are_a_day_apart_at_the_same_instant() {
        // Pacific/Kiritimati keeps UTC+14 and Pacific/Pago_Pago UTC−11 (tz database;
        // checked against Python 3.11's zoneinfo: 2026-12-05 07:44+14 and 2026-12-04 06:44−11).
        let at = utc("2026-12-04T17:44:00Z");
        assert_eq!(zone("Pacific/Kiritimati").day_of(at), date(2026, 12, 5));
        assert_eq!(zone("Pacific/Pago_Pago").day_of(at), date(2026, 12, 4));
        assert_eq!(SiteZone::UTC.day_of(at), date(2026, 12, 4));
        let early = utc("2026-12-04T09:00:00Z");
        assert_eq!(zone("Pacific/Pago_Pago").day_of(early), date(2026, 12, 3));
    }

    #[test]
    fn a_zone_whose_clocks_skip_midnight_starts_its_day_after_the_gap() {
        // America/Santiago springs forward at 24:00 local on the first Saturday of
        // September in 2024 (Chile's rule in the tz database): 2024-09-08 has no 00:00.
        // Python 3.11's zoneinfo gives the same: the day runs 04:00Z to 03:00Z next day.
        let z = zone("America/Santiago");
        let (start, end) = z.range(date(2024, 9, 8));
        assert_eq!(start, utc("2024-09-08T04:00:00Z"));
        assert_eq!(z.day_of(start), date(2024, 9, 8));
        assert_eq!(z.day_of(start.plus_ms(-1)), date(2024, 9, 7));
        assert_eq!(
            (end.0 - start.0) / 3_600_000,
            23,
            "the skipped hour is missing"
        );
    }

    #[test]
    fn a_two_oclock_job_runs_once_each_local_day_across_both_chicago_dst_nights() {
        // 2026-03-08 has no 02:00 in Chicago (02:00 CST → 03:00 CDT, 08:00Z); 2026-11-01
        // has 02:00 CST once, at 08:00Z, after 01:00–02:00 was lived twice (US rule; the
        // instants checked with Python 3.11's zoneinfo).
        let z = zone("America/Chicago");
        assert_eq!(z.at_local(date(2026, 3, 8), 2), utc("2026-03-08T08:00:00Z"));
        assert_eq!(
            z.at_local(date(2026, 11, 1), 2),
            utc("2026-11-01T08:00:00Z")
        );
        assert_eq!(z.at_local(date(2026, 6, 1), 2), utc("2026-06-01T07:00:00Z"));
        for (from, to) in [
            ("2026-03-06T00:00:00Z", "2026-03-11T00:00:00Z"),
            ("2026-10-30T00:00:00Z", "2026-11-04T00:00:00Z"),
        ] {
            let mut now = utc(from);
            let mut job = Daily::starting(z, 2, now);
            let mut runs = Vec::new();
            // Step a minute at a time, as a scheduler that wakes often would.
            while now < utc(to) {
                if let Some(day) = job.due(now) {
                    runs.push((day, now));
                    job.done = Some(day);
                }
                now = now.plus_ms(60_000);
            }
            let days: Vec<NaiveDate> = runs.iter().map(|r| r.0).collect();
            let mut unique = days.clone();
            unique.dedup();
            assert_eq!(days, unique, "once per local day: {runs:?}");
            assert_eq!(days.len(), 5, "{runs:?}");
            for (day, at) in runs {
                assert_eq!(at, z.at_local(day, 2), "{day} ran at its local 02:00");
            }
        }
    }

    #[test]
    fn the_next_wake_is_the_local_hour_today_or_tomorrow() {
        let z = zone("Asia/Kathmandu");
        let job = Daily {
            zone: z,
            hour: 2,
            done: None,
        };
        // 2026-12-04 01:00 local is 2026-12-03T19:15Z; 02:00 local is 20:15Z.
        assert_eq!(
            job.next_at(utc("2026-12-03T19:15:00Z")),
            utc("2026-12-03T20:15:00Z")
        );
        let ran = Daily {
            done: Some(date(2026, 12, 4)),
            ..job
        };
        assert_eq!(
            ran.next_at(utc("2026-12-03T21:00:00Z")),
            utc("2026-12-04T20:15:00Z")
        );
        assert_eq!(
            job.due(utc("2026-12-03T21:00:00Z")),
            Some(date(2026, 12, 4))
        );
        assert_eq!(ran.due(utc("2026-12-03T21:00:00Z")), None);
    }

    const SOME_ZONES: &[&str] = &[
        "UTC",
        "America/Chicago",
        "America/Santiago",
        "America/St_Johns",
        "Europe/London",
        "Europe/Berlin",
        "Australia/Lord_Howe",
        "Asia/Kathmandu",
        "Pacific/Kiritimati",
        "Pacific/Pago_Pago",
        "Pacific/Chatham",
    ];

    proptest! {
        #[test]
        fn every_instant_lies_in_the_range_of_its_own_day(
            ms in 946_684_800_000i64..4_102_444_800_000i64,
            z in 0..SOME_ZONES.len(),
        ) {
            let zone = SiteZone::parse(SOME_ZONES[z]).unwrap();
            let at = Timestamp(ms);
            let day = zone.day_of(at);
            let (start, end) = zone.range(day);
            prop_assert!(start <= at && at < end, "{} {at}: {day} is [{start}, {end})", zone);
            prop_assert_eq!(zone.day_of(start), day);
            prop_assert_eq!(zone.day_of(end.plus_ms(-1)), day);
            prop_assert_eq!(zone.day_of(end), day.succ_opt().unwrap());
            let hours = (end.0 - start.0) as f64 / 3_600_000.0;
            prop_assert!((22.0..=26.0).contains(&hours), "{} {day}: {hours} h", zone);
        }
    }
}
