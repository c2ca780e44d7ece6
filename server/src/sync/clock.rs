//! A phone's clock against the server's (DESIGN.md §6): each sync carries the device
//! clock and the round trip of the phone's previous request; the server answers with its
//! own. Pure arithmetic, no I/O.

use crate::time::Timestamp;

/// Round trip assumed when the phone has not measured one yet, in ms: generous, so a
/// first sync over a slow link does not claim more precision than it has.
pub const UNMEASURED_RTT_MS: i64 = 2_000;
/// Drift allowed between a phone's clock and the server's, in parts per million, for the
/// time between an event and the sync that carries it. Phone clocks kept by the network
/// drift far less; a quartz clock left alone stays within about 50 ppm (from memory), so 200
/// is a safe margin.
pub const DRIFT_PPM: i64 = 200;

/// One sample of a device's clock: server time = device time + `offset_ms`, give or take
/// `uncertainty_ms`, at the moment the device read `device_clock`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ClockSample {
    pub device_clock: i64,
    pub offset_ms: i64,
    pub uncertainty_ms: i64,
}

impl ClockSample {
    /// Estimates the offset from a request the device sent at `device_clock` and the server
    /// read at `received`. The request took between 0 and a whole round trip to arrive; the
    /// middle, half a round trip, is the estimate and the other half its uncertainty.
    pub fn measure(received: Timestamp, device_clock: i64, rtt_ms: Option<i64>) -> Self {
        let rtt = rtt_ms.unwrap_or(UNMEASURED_RTT_MS).max(0);
        let half = (rtt + 1) / 2;
        Self {
            device_clock,
            offset_ms: received.0.saturating_sub(device_clock).saturating_sub(half),
            uncertainty_ms: half,
        }
    }

    /// Converts a device reading to server time with its uncertainty: the sample's own,
    /// plus the drift allowed for the time between the reading and the sample.
    pub fn correct(&self, device_at: i64) -> (Timestamp, i64) {
        (
            Timestamp(device_at.saturating_add(self.offset_ms)),
            self.uncertainty_ms
                .saturating_add(drift_ms(device_at, self.device_clock)),
        )
    }
}

/// Returns the drift allowed between two readings of a clock `a` and `b` ms apart: DRIFT_PPM
/// of the time between them, rounded up.
pub fn drift_ms(a: i64, b: i64) -> i64 {
    let apart = a.abs_diff(b).min(i64::MAX as u64) as i64;
    apart.saturating_mul(DRIFT_PPM).saturating_add(999_999) / 1_000_000
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_phone_two_minutes_slow_is_put_right_within_half_its_round_trip() {
        // The phone reads 10:00:00.000 when the server reads 10:02:00.100; the round trip
        // was 200 ms, so the request took 0–200 ms: offset 120 s ± 100 ms.
        let server = Timestamp(1_000_000 + 120_100);
        let s = ClockSample::measure(server, 1_000_000, Some(200));
        assert_eq!((s.offset_ms, s.uncertainty_ms), (120_000, 100));
        let (at, u) = s.correct(1_000_000);
        assert_eq!((at.0, u), (1_120_000, 100));
    }

    #[test]
    fn an_event_from_hours_ago_carries_the_drift_allowance() {
        let s = ClockSample::measure(Timestamp(10_000_000), 10_000_000, Some(100));
        // Five hours before the sync: 18,000,000 ms × 200 ppm = 3,600 ms more.
        let (_, u) = s.correct(10_000_000 - 18_000_000);
        assert_eq!(u, 50 + 3_600);
    }

    #[test]
    fn a_first_sync_without_a_round_trip_claims_a_wide_uncertainty() {
        let s = ClockSample::measure(Timestamp(5_000), 4_000, None);
        assert_eq!(s.uncertainty_ms, UNMEASURED_RTT_MS / 2);
        assert_eq!(s.offset_ms, 0);
    }
}
