//! The server's own figures in Prometheus' text format (version 0.0.4), served at
//! `/metrics`: requests by route and status, sync events by outcome, the size of the
//! batches phones send from their outboxes, netting runs, and how long the database
//! takes. A handful of counters and fixed-bucket histograms on atomics: no registry
//! crate, nothing allocated on the hot path except the per-route map entry.
//!
//! The figures are per process (one static set): a test that reads them compares
//! before and after, since other servers in the same test process add to them too.

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::sync::Mutex;
use std::sync::atomic::{AtomicU64, Ordering::Relaxed};
use std::time::Duration;

/// Upper bounds (seconds) of the latency buckets.
const LATENCY_BUCKETS_S: [f64; 12] = [
    0.000_5, 0.001, 0.002_5, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 5.0,
];
/// Upper bounds of the batch-size buckets (events per sync request, at most 500).
const BATCH_BUCKETS: [f64; 9] = [1.0, 5.0, 10.0, 25.0, 50.0, 100.0, 200.0, 300.0, 500.0];
/// Upper bounds of the group-commit buckets (shared writes per commit, at most 32).
const GROUP_BUCKETS: [f64; 6] = [1.0, 2.0, 4.0, 8.0, 16.0, 32.0];
/// Distinct (method, route, status) series kept; more fall into one "other" series,
/// so a scan of random paths cannot grow the map without bound.
const MAX_REQUEST_SERIES: usize = 512;

/// A histogram with fixed buckets; the sum is kept in micro-units.
pub struct Histogram {
    bounds: &'static [f64],
    counts: Vec<AtomicU64>,
    sum_micro: AtomicU64,
    count: AtomicU64,
}

impl Histogram {
    fn new(bounds: &'static [f64]) -> Self {
        Self {
            bounds,
            counts: (0..bounds.len()).map(|_| AtomicU64::new(0)).collect(),
            sum_micro: AtomicU64::new(0),
            count: AtomicU64::new(0),
        }
    }

    /// Records one observation.
    pub fn observe(&self, value: f64) {
        if let Some(i) = self.bounds.iter().position(|b| value <= *b) {
            self.counts[i].fetch_add(1, Relaxed);
        }
        self.sum_micro
            .fetch_add((value.max(0.0) * 1e6).round() as u64, Relaxed);
        self.count.fetch_add(1, Relaxed);
    }

    /// Records a duration in seconds.
    pub fn observe_duration(&self, d: Duration) {
        self.observe(d.as_secs_f64());
    }

    /// Returns how many observations were made.
    pub fn count(&self) -> u64 {
        self.count.load(Relaxed)
    }

    fn render(&self, out: &mut String, name: &str, labels: &str) {
        let sep = if labels.is_empty() { "" } else { "," };
        let mut cumulative = 0;
        for (bound, n) in self.bounds.iter().zip(&self.counts) {
            cumulative += n.load(Relaxed);
            let _ = writeln!(
                out,
                "{name}_bucket{{{labels}{sep}le=\"{bound}\"}} {cumulative}"
            );
        }
        let count = self.count.load(Relaxed);
        let _ = writeln!(out, "{name}_bucket{{{labels}{sep}le=\"+Inf\"}} {count}");
        let sum = self.sum_micro.load(Relaxed) as f64 / 1e6;
        let braces = if labels.is_empty() {
            String::new()
        } else {
            format!("{{{labels}}}")
        };
        let _ = writeln!(out, "{name}_sum{braces} {sum}");
        let _ = writeln!(out, "{name}_count{braces} {count}");
    }
}

/// One route's request figures.
struct RouteSeries {
    requests: AtomicU64,
}

/// Every figure the server keeps.
pub struct Metrics {
    requests: Mutex<BTreeMap<(&'static str, String, u16), RouteSeries>>,
    request_seconds: Histogram,
    pub sync_accepted: AtomicU64,
    pub sync_repeats: AtomicU64,
    pub sync_rejected: AtomicU64,
    pub sync_conflicts: AtomicU64,
    pub sync_batch_events: Histogram,
    pub netting_runs: AtomicU64,
    pub db_write_seconds: Histogram,
    pub db_write_wait_seconds: Histogram,
    pub db_write_group_size: Histogram,
    pub db_read_seconds: Histogram,
    /// PostgreSQL: time a write waits for its sites' advisory locks.
    pub db_lock_wait_seconds: Histogram,
    /// PostgreSQL: writes that found their site's lock held by another transaction (on
    /// this server or another) and had to wait for it.
    pub db_lock_contended: AtomicU64,
    /// PostgreSQL: the connection pool (size, idle, callers waiting); -1 until a PostgreSQL
    /// store reports it, and not shown then.
    pub db_pool: [std::sync::atomic::AtomicI64; 3],
}

static METRICS: std::sync::LazyLock<Metrics> = std::sync::LazyLock::new(|| Metrics {
    requests: Mutex::new(BTreeMap::new()),
    request_seconds: Histogram::new(&LATENCY_BUCKETS_S),
    sync_accepted: AtomicU64::new(0),
    sync_repeats: AtomicU64::new(0),
    sync_rejected: AtomicU64::new(0),
    sync_conflicts: AtomicU64::new(0),
    sync_batch_events: Histogram::new(&BATCH_BUCKETS),
    netting_runs: AtomicU64::new(0),
    db_write_seconds: Histogram::new(&LATENCY_BUCKETS_S),
    db_write_wait_seconds: Histogram::new(&LATENCY_BUCKETS_S),
    db_write_group_size: Histogram::new(&GROUP_BUCKETS),
    db_read_seconds: Histogram::new(&LATENCY_BUCKETS_S),
    db_lock_wait_seconds: Histogram::new(&LATENCY_BUCKETS_S),
    db_lock_contended: AtomicU64::new(0),
    db_pool: std::array::from_fn(|_| std::sync::atomic::AtomicI64::new(-1)),
});

/// Returns the process's figures.
pub fn metrics() -> &'static Metrics {
    &METRICS
}

impl Metrics {
    /// Records one answered request under its route template (never the raw path).
    pub fn request(&self, method: &'static str, route: &str, status: u16, took: Duration) {
        self.request_seconds.observe_duration(took);
        let mut map = self
            .requests
            .lock()
            .expect("the metrics lock is never poisoned: nothing panics while holding it");
        let key = (method, route.to_string(), status);
        let key = if map.contains_key(&key) || map.len() < MAX_REQUEST_SERIES {
            key
        } else {
            (method, "other".to_string(), status)
        };
        map.entry(key)
            .or_insert_with(|| RouteSeries {
                requests: AtomicU64::new(0),
            })
            .requests
            .fetch_add(1, Relaxed);
    }

    /// Records the outcome of one sync request's events.
    pub fn sync_batch(&self, accepted: u64, repeats: u64, rejected: u64, conflicts: u64) {
        self.sync_accepted.fetch_add(accepted, Relaxed);
        self.sync_repeats.fetch_add(repeats, Relaxed);
        self.sync_rejected.fetch_add(rejected, Relaxed);
        self.sync_conflicts.fetch_add(conflicts, Relaxed);
        self.sync_batch_events
            .observe((accepted + rejected + conflicts) as f64);
    }

    /// Renders every figure in Prometheus' text format.
    pub fn render(&self) -> String {
        let mut out = String::with_capacity(8 * 1024);
        out.push_str(
            "# HELP cairn_http_requests_total HTTP requests answered, by route template and status.\n\
             # TYPE cairn_http_requests_total counter\n",
        );
        {
            let map = self
                .requests
                .lock()
                .expect("the metrics lock is never poisoned");
            for ((method, route, status), s) in map.iter() {
                let _ = writeln!(
                    out,
                    "cairn_http_requests_total{{method=\"{method}\",route=\"{}\",status=\"{status}\"}} {}",
                    escape(route),
                    s.requests.load(Relaxed)
                );
            }
        }
        histogram(
            &mut out,
            "cairn_http_request_duration_seconds",
            "Time from request to response head.",
            &self.request_seconds,
        );
        out.push_str(
            "# HELP cairn_sync_events_total Events phones sent, by outcome (a resend is accepted again as a repeat).\n\
             # TYPE cairn_sync_events_total counter\n",
        );
        for (result, n) in [
            ("accepted", self.sync_accepted.load(Relaxed)),
            ("rejected", self.sync_rejected.load(Relaxed)),
            ("conflict", self.sync_conflicts.load(Relaxed)),
        ] {
            let _ = writeln!(out, "cairn_sync_events_total{{result=\"{result}\"}} {n}");
        }
        counter(
            &mut out,
            "cairn_sync_repeat_events_total",
            "Accepted events that had been stored before (resends), included in accepted.",
            self.sync_repeats.load(Relaxed),
        );
        histogram(
            &mut out,
            "cairn_sync_batch_events",
            "Events per sync request (the phone's outbox batch).",
            &self.sync_batch_events,
        );
        counter(
            &mut out,
            "cairn_netting_runs_total",
            "Count results written by netting a finished bin (first nettings and re-nets after late lines).",
            self.netting_runs.load(Relaxed),
        );
        histogram(
            &mut out,
            "cairn_db_write_seconds",
            "Time the writer thread spends on one write (transaction and commit).",
            &self.db_write_seconds,
        );
        histogram(
            &mut out,
            "cairn_db_write_wait_seconds",
            "Time a write waits in the writer's queue.",
            &self.db_write_wait_seconds,
        );
        histogram(
            &mut out,
            "cairn_db_write_group_size",
            "Phone syncs committed together in one transaction (group commit).",
            &self.db_write_group_size,
        );
        histogram(
            &mut out,
            "cairn_db_read_seconds",
            "Time one read takes on a reader connection.",
            &self.db_read_seconds,
        );
        if self.db_pool[0].load(Relaxed) >= 0 {
            histogram(
                &mut out,
                "cairn_db_lock_wait_seconds",
                "Time a write waits for its site's lock (writes of one site take turns across servers).",
                &self.db_lock_wait_seconds,
            );
            let _ = writeln!(
                out,
                "# HELP cairn_db_lock_contended_total Writes that found their site's lock held by another transaction and waited.\n\
                 # TYPE cairn_db_lock_contended_total counter\ncairn_db_lock_contended_total {}",
                self.db_lock_contended.load(Relaxed)
            );
            for (i, (name, help)) in [
                (
                    "cairn_db_pool_connections",
                    "Connections the pool holds open.",
                ),
                ("cairn_db_pool_idle", "Connections in the pool not in use."),
                (
                    "cairn_db_pool_waiting",
                    "Requests waiting for a connection.",
                ),
            ]
            .into_iter()
            .enumerate()
            {
                let _ = writeln!(
                    out,
                    "# HELP {name} {help}\n# TYPE {name} gauge\n{name} {}",
                    self.db_pool[i].load(Relaxed)
                );
            }
        }
        let _ = writeln!(
            out,
            "# HELP cairn_build_info The build serving: version, commit, build day, schema version.\n\
             # TYPE cairn_build_info gauge\n\
             cairn_build_info{{version=\"{}\",commit=\"{}\",build_date=\"{}\",schema_version=\"{}\"}} 1",
            escape(crate::build_info::VERSION),
            escape(crate::build_info::COMMIT),
            escape(crate::build_info::BUILD_DATE),
            crate::build_info::schema_version()
        );
        out
    }
}

fn counter(out: &mut String, name: &str, help: &str, value: u64) {
    let _ = writeln!(
        out,
        "# HELP {name} {help}\n# TYPE {name} counter\n{name} {value}"
    );
}

fn histogram(out: &mut String, name: &str, help: &str, h: &Histogram) {
    let _ = writeln!(out, "# HELP {name} {help}\n# TYPE {name} histogram");
    h.render(out, name, "");
}

/// Escapes a label value (backslash, quote, newline).
fn escape(v: &str) -> String {
    v.replace('\\', "\\\\")
        .replace('"', "\\\"")
        .replace('\n', "\\n")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_histogram_renders_cumulative_buckets_sum_and_count() {
        static BOUNDS: [f64; 3] = [1.0, 5.0, 10.0];
        let h = Histogram::new(&BOUNDS);
        for v in [0.5, 1.0, 3.0, 7.0, 20.0] {
            h.observe(v);
        }
        let mut out = String::new();
        h.render(&mut out, "x", "");
        // Prometheus exposition format: buckets are cumulative and +Inf equals the count.
        assert_eq!(
            out,
            "x_bucket{le=\"1\"} 2\nx_bucket{le=\"5\"} 3\nx_bucket{le=\"10\"} 4\n\
             x_bucket{le=\"+Inf\"} 5\nx_sum 31.5\nx_count 5\n"
        );
    }

    #[test]
    fn a_label_value_with_quotes_is_escaped() {
        assert_eq!(escape("a\"b\\c\nd"), "a\\\"b\\\\c\\nd");
    }
}
