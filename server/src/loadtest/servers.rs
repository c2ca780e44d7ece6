//! `cairn loadtest --db postgres://…`: the same phones against one `cairn serve`, then
//! against two, over one PostgreSQL database, in one run. Each phone counts at one site;
//! a site's phones go to one server (with two servers, half the sites each), so the two
//! servers write disjoint sites. Reported per phase: events per second in all, request
//! latency, and for each server process its events, CPU seconds and CPU seconds per
//! 1,000 events, and how long its writes waited for a site's lock; beside them the CPU
//! the PostgreSQL processes on this machine and the load client spent.
//!
//! The run makes a scratch database on the URL's server (the role needs CREATEDB) and
//! drops it at the end; the database the URL names is only connected to.

use super::{LoadSecrets, Phone, master_data, set_up};
use crate::AppState;
use crate::config::Config;
use crate::store::DbLocation;
use anyhow::{Context, ensure};
use std::collections::HashMap;
use std::io::{BufRead, BufReader};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

/// The load's shape.
#[derive(Debug, Clone)]
pub struct ServersSpec {
    /// A PostgreSQL server and a database to connect to (`postgres://…`).
    pub url: String,
    pub phones: usize,
    pub sites: usize,
    pub seconds: u64,
    pub batch: usize,
    pub interval: Duration,
}

/// Rounds of the pair of phases one run may ask for (`--rounds`): enough to see the
/// spread on a shared machine, few enough that a typo does not keep it busy for hours.
pub const MAX_ROUNDS: usize = 20;

/// One server process during one phase.
#[derive(Debug, Clone, Default)]
pub struct ServerFigures {
    pub events: u64,
    pub cpu_s: f64,
    /// Of `cpu_s`, the seconds spent in the kernel on the process's behalf (system
    /// calls: sockets, and waking and parking its threads).
    pub kernel_s: f64,
    /// Writes that took a site's lock, how many found it held by another transaction
    /// and waited, and the time taking the locks took in all (round trips included).
    pub locks: u64,
    pub contended: u64,
    pub lock_wait_s: f64,
}

impl ServerFigures {
    /// CPU seconds per 1,000 events, all of them or those in user space only.
    pub fn cpu_per_1k(&self, user_only: bool) -> f64 {
        let cpu = if user_only {
            self.cpu_s - self.kernel_s
        } else {
            self.cpu_s
        };
        cpu / (self.events.max(1) as f64) * 1000.0
    }
}

/// One phase: the same phones against `servers.len()` servers.
#[derive(Debug, Clone)]
pub struct Phase {
    pub servers: Vec<ServerFigures>,
    pub elapsed: Duration,
    pub p50_ms: f64,
    pub p99_ms: f64,
    pub postgres_cpu_s: f64,
    pub client_cpu_s: f64,
}

impl Phase {
    pub fn events(&self) -> u64 {
        self.servers.iter().map(|s| s.events).sum()
    }

    pub fn events_per_s(&self) -> f64 {
        self.events() as f64 / self.elapsed.as_secs_f64()
    }
}

/// Runs the one-server phase, then the two-server phase, each in a scratch database of
/// its own (so the second does not write into tables the first has grown); returns both.
pub async fn run(spec: ServersSpec) -> anyhow::Result<Vec<Phase>> {
    ensure!(
        spec.sites >= 2 && spec.sites <= 99,
        "--sites is 2 to 99 (two servers take half each)"
    );
    ensure!(
        spec.phones >= spec.sites,
        "--phones ({}) must be at least --sites ({}): every site has a phone",
        spec.phones,
        spec.sites
    );
    let mut out = Vec::new();
    for servers in [1, 2] {
        let scratch = Scratch::create(&spec.url).await?;
        let outcome = servers_phase(&spec, &scratch.url, servers).await;
        scratch.drop_now().await;
        out.push(outcome?);
    }
    Ok(out)
}

/// Sets up the spec's sites and phones in the empty database `url`, starts `servers`
/// server processes on it and drives the phones against them.
async fn servers_phase(spec: &ServersSpec, url: &str, servers: usize) -> anyhow::Result<Phase> {
    let state = AppState::open(Config {
        db: DbLocation::Postgres(url.to_string()),
        ..Config::default()
    })?;
    let secrets = LoadSecrets::new().await?;
    let codes: Vec<String> = (0..spec.sites)
        .map(|s| format!("L{servers}S{s:02}"))
        .collect();
    let mut phones = Vec::new();
    let mut admins = Vec::new();
    let mut next_user = 0;
    for (s, code) in codes.iter().enumerate() {
        let n = spec.phones / spec.sites + usize::from(s < spec.phones % spec.sites);
        let (tokens, admin) = set_up(&state, code, next_user, n, &secrets).await?;
        for (b, token) in tokens.into_iter().enumerate() {
            let phone = Phone {
                site: code.clone(),
                user: next_user + b,
                bin: b,
            };
            phones.push((s, phone, token));
        }
        next_user += n;
        admins.push((code.clone(), admin, n));
    }
    let mut procs = Vec::new();
    for _ in 0..servers {
        procs.push(ServerProcess::start(url)?);
    }
    for (code, admin, n) in &admins {
        master_data(&procs[0].base, code, admin, *n).await?;
    }
    let outcome = phase(spec, &procs, phones).await;
    for p in procs {
        p.stop();
    }
    drop(state);
    outcome
}

/// Drives `phones` (site index, phone, token) against `procs` (site s on server
/// s mod servers) for the spec's seconds.
async fn phase(
    spec: &ServersSpec,
    procs: &[ServerProcess],
    phones: Vec<(usize, Phone, String)>,
) -> anyhow::Result<Phase> {
    let n = procs.len();
    let locks_before: Vec<LockFigures> = lock_figures(procs).await?;
    let cpu_before: Vec<CpuTime> = procs.iter().map(|p| cpu_time(p.child.id())).collect();
    let pg_before = postgres_cpu();
    let client_before = cpu_seconds(std::process::id());
    let started = Instant::now();
    let deadline = started + Duration::from_secs(spec.seconds);
    let count = phones.len();
    let mut tasks = Vec::new();
    for (i, (s, phone, token)) in phones.into_iter().enumerate() {
        let base = procs[s % n].base.clone();
        let (batch, interval) = (spec.batch, spec.interval);
        let first = started + interval.mul_f64(i as f64 / count as f64);
        tasks.push(tokio::spawn(async move {
            let r = phone
                .run(&base, &token, batch, deadline, first, interval)
                .await;
            (s % n, r)
        }));
    }
    let mut servers = vec![ServerFigures::default(); n];
    let mut latencies = Vec::new();
    for t in tasks {
        let (server, r) = t.await?;
        let (l, e) = r?;
        latencies.extend(l);
        servers[server].events += e;
    }
    let elapsed = started.elapsed();
    let client_cpu_s = cpu_seconds(std::process::id()) - client_before;
    let postgres_cpu_s = postgres_cpu_since(&pg_before);
    let locks_after = lock_figures(procs).await?;
    for (i, s) in servers.iter_mut().enumerate() {
        let cpu = cpu_time(procs[i].child.id());
        s.cpu_s = cpu.total() - cpu_before[i].total();
        s.kernel_s = cpu.kernel_s - cpu_before[i].kernel_s;
        s.locks = locks_after[i].count - locks_before[i].count;
        s.contended = locks_after[i].contended - locks_before[i].contended;
        s.lock_wait_s = locks_after[i].sum_s - locks_before[i].sum_s;
    }
    latencies.sort_by(f64::total_cmp);
    let pick = |q: f64| {
        latencies
            .get(((latencies.len() as f64 - 1.0) * q).round() as usize)
            .copied()
            .unwrap_or(0.0)
    };
    Ok(Phase {
        servers,
        elapsed,
        p50_ms: pick(0.5),
        p99_ms: pick(0.99),
        postgres_cpu_s,
        client_cpu_s,
    })
}

/// Every server's lock figures, read from its `/metrics`.
async fn lock_figures(procs: &[ServerProcess]) -> anyhow::Result<Vec<LockFigures>> {
    let client = reqwest::Client::new();
    let mut out = Vec::new();
    for p in procs {
        let text = client
            .get(format!("{}/metrics", p.base))
            .send()
            .await?
            .text()
            .await?;
        out.push(LockFigures::read(&text));
    }
    Ok(out)
}

/// The site-lock figures of one server's `/metrics`.
#[derive(Debug, Default)]
struct LockFigures {
    count: u64,
    contended: u64,
    sum_s: f64,
}

impl LockFigures {
    fn read(metrics: &str) -> Self {
        let value = |prefix: &str| {
            metrics
                .lines()
                .find(|l| l.starts_with(prefix))
                .and_then(|l| l.rsplit(' ').next())
                .and_then(|v| v.parse::<f64>().ok())
                .unwrap_or(0.0)
        };
        LockFigures {
            count: value("cairn_db_lock_wait_seconds_count ") as u64,
            contended: value("cairn_db_lock_contended_total ") as u64,
            sum_s: value("cairn_db_lock_wait_seconds_sum "),
        }
    }
}

/// A `cairn serve` child process over the database.
struct ServerProcess {
    child: Child,
    base: String,
}

impl ServerProcess {
    fn start(url: &str) -> anyhow::Result<Self> {
        let exe = std::env::current_exe().context("finding the cairn binary")?;
        let mut child = Command::new(exe)
            .args(["serve", "--db", url, "--listen", "127.0.0.1:0"])
            .env("RUST_LOG", "warn")
            .stdout(Stdio::piped())
            .stderr(Stdio::inherit())
            .spawn()
            .context("starting cairn serve")?;
        let mut line = String::new();
        BufReader::new(child.stdout.take().context("the server's output")?).read_line(&mut line)?;
        let base = line
            .split(" at ")
            .nth(1)
            .with_context(|| format!("cairn serve said {line:?}"))?
            .trim()
            .trim_end_matches('/')
            .to_string();
        Ok(Self { child, base })
    }

    fn stop(mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

/// Linux counts a process's CPU time in clock ticks of 1/100 s (USER_HZ, 100 on every
/// architecture Cairn builds for).
const TICKS_PER_S: f64 = 100.0;

/// CPU seconds a process (all its threads) has used, in user space and in the kernel.
#[derive(Debug, Clone, Copy, Default)]
pub struct CpuTime {
    pub user_s: f64,
    pub kernel_s: f64,
}

impl CpuTime {
    pub fn total(&self) -> f64 {
        self.user_s + self.kernel_s
    }
}

/// The CPU time process `pid` has used, from `/proc/PID/stat`; zero where that cannot
/// be read.
pub fn cpu_time(pid: u32) -> CpuTime {
    std::fs::read_to_string(format!("/proc/{pid}/stat"))
        .ok()
        .and_then(|s| {
            // Fields after the command's closing parenthesis: state is the first,
            // utime the twelfth and stime the thirteenth.
            let rest = s.rsplit_once(')')?.1;
            let f: Vec<&str> = rest.split_whitespace().collect();
            let ticks = |i: usize| Some(f.get(i)?.parse::<u64>().ok()? as f64 / TICKS_PER_S);
            Some(CpuTime {
                user_s: ticks(11)?,
                kernel_s: ticks(12)?,
            })
        })
        .unwrap_or_default()
}

/// User and system CPU seconds process `pid` has used (see [`cpu_time`]).
pub fn cpu_seconds(pid: u32) -> f64 {
    cpu_time(pid).total()
}

/// CPU seconds of every PostgreSQL process on this machine, by pid.
fn postgres_cpu() -> HashMap<u32, f64> {
    let mut out = HashMap::new();
    let Ok(dir) = std::fs::read_dir("/proc") else {
        return out;
    };
    for entry in dir.flatten() {
        let Some(pid) = entry
            .file_name()
            .to_str()
            .and_then(|s| s.parse::<u32>().ok())
        else {
            continue;
        };
        let comm = std::fs::read_to_string(format!("/proc/{pid}/comm")).unwrap_or_default();
        if comm.trim() == "postgres" {
            out.insert(pid, cpu_seconds(pid));
        }
    }
    out
}

/// CPU seconds PostgreSQL's processes used since `before` (those still running).
fn postgres_cpu_since(before: &HashMap<u32, f64>) -> f64 {
    postgres_cpu()
        .iter()
        .map(|(pid, s)| s - before.get(pid).copied().unwrap_or(0.0))
        .sum()
}

/// The scratch database of one run, on the server `admin` names.
struct Scratch {
    admin: String,
    name: String,
    url: String,
}

impl Scratch {
    async fn create(admin: &str) -> anyhow::Result<Self> {
        let name = format!(
            "cairn_loadtest_{}",
            &uuid::Uuid::now_v7().simple().to_string()[20..]
        );
        crate::store::postgres::admin_execute(admin, &format!("create database {name}"))
            .await
            .context("creating the load's scratch database (the role needs CREATEDB)")?;
        Ok(Self {
            admin: admin.to_string(),
            url: crate::store::postgres::with_database(admin, &name),
            name,
        })
    }

    async fn drop_now(self) {
        if let Err(e) = crate::store::postgres::admin_execute(
            &self.admin,
            &format!("drop database if exists {} with (force)", self.name),
        )
        .await
        {
            tracing::warn!("could not drop the scratch database {}: {e:#}", self.name);
        }
    }
}

/// The report: one line a phase, then one a server.
pub fn report(spec: &ServersSpec, phases: &[Phase]) -> String {
    let mut out = format!(
        "PostgreSQL: {} phones on {} sites, {} events a request, {} s a phase\n",
        spec.phones, spec.sites, spec.batch, spec.seconds
    );
    for p in phases {
        let events = p.events().max(1) as f64;
        out += &format!(
            "{} server{}: {} events, {:.0} events/s; latency p50 {:.1} ms, p99 {:.1} ms; \
             PostgreSQL {:.4} CPU s/1k events, load client {:.4}\n",
            p.servers.len(),
            if p.servers.len() == 1 { "" } else { "s" },
            p.events(),
            p.events_per_s(),
            p.p50_ms,
            p.p99_ms,
            p.postgres_cpu_s / events * 1000.0,
            p.client_cpu_s / events * 1000.0,
        );
        for (i, s) in p.servers.iter().enumerate() {
            let versus_one = match phases.first().and_then(|one| one.servers.first()) {
                Some(one) if p.servers.len() > 1 && one.cpu_s > one.kernel_s => format!(
                    " ({:.2} of one server's; in user space {:.2})",
                    s.cpu_per_1k(false) / one.cpu_per_1k(false),
                    s.cpu_per_1k(true) / one.cpu_per_1k(true),
                ),
                _ => String::new(),
            };
            out += &format!(
                "  server {}: {} events, {:.2} CPU s ({:.2} in the kernel), {:.4} CPU s/1k \
                 events{}; {} site-lock takes, {} found it held and waited, {:.3} s taking \
                 them in all\n",
                i + 1,
                s.events,
                s.cpu_s,
                s.kernel_s,
                s.cpu_per_1k(false),
                versus_one,
                s.locks,
                s.contended,
                s.lock_wait_s
            );
        }
    }
    out
}

/// What one round (a one-server phase, then a two-server phase) says about scaling
/// out: the two servers' events a second over the one's, and each server of two's CPU
/// an event over the one server's.
#[derive(Debug, Clone, PartialEq)]
pub struct RoundRatios {
    pub total: f64,
    pub per_event: Vec<f64>,
}

impl RoundRatios {
    /// The ratios of a round's phases (`None` unless it has a one-server phase and a
    /// phase of more, with events and CPU to divide by).
    pub fn of(phases: &[Phase]) -> Option<Self> {
        let [one_phase, two, ..] = phases else {
            return None;
        };
        let one = one_phase.servers.first()?;
        if one.events == 0 || one.cpu_s <= 0.0 || two.servers.len() < 2 {
            return None;
        }
        Some(Self {
            total: two.events_per_s() / one_phase.events_per_s(),
            per_event: two
                .servers
                .iter()
                .map(|s| s.cpu_per_1k(false) / one.cpu_per_1k(false))
                .collect(),
        })
    }
}

/// The closing lines of a run of several rounds: the median and range of both ratios,
/// so one noisy round on a shared machine is seen for what it is.
pub fn summary(rounds: &[RoundRatios]) -> String {
    fn spread(mut v: Vec<f64>) -> String {
        if v.is_empty() {
            return "no figures".to_string();
        }
        v.sort_by(f64::total_cmp);
        let n = v.len();
        let median = if n % 2 == 1 {
            v[n / 2]
        } else {
            (v[n / 2 - 1] + v[n / 2]) / 2.0
        };
        let mean = v.iter().sum::<f64>() / n as f64;
        format!(
            "median {median:.2}, mean {mean:.2}, range {:.2}-{:.2} ({n} figures)",
            v[0],
            v[n - 1]
        )
    }
    format!(
        "{} rounds. Two servers' events/s over one server's: {}.\n\
         Each server of two, CPU an event over the one server's: {}.\n",
        rounds.len(),
        spread(rounds.iter().map(|r| r.total).collect()),
        spread(rounds.iter().flat_map(|r| r.per_event.clone()).collect()),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn lock_figures_come_from_the_histogram() {
        let text = "cairn_db_lock_wait_seconds_bucket{le=\"0.0005\"} 7\n\
                    cairn_db_lock_wait_seconds_sum 0.25\n\
                    cairn_db_lock_wait_seconds_count 12\n\
                    cairn_db_lock_contended_total 3\n";
        let f = LockFigures::read(text);
        assert_eq!((f.count, f.contended), (12, 3));
        assert!((f.sum_s - 0.25).abs() < 1e-12);
    }

    fn server(events: u64, cpu_s: f64) -> ServerFigures {
        ServerFigures {
            events,
            cpu_s,
            kernel_s: cpu_s / 4.0,
            ..ServerFigures::default()
        }
    }

    fn phase(servers: Vec<ServerFigures>) -> Phase {
        Phase {
            servers,
            elapsed: Duration::from_secs(10),
            p50_ms: 0.0,
            p99_ms: 0.0,
            postgres_cpu_s: 0.0,
            client_cpu_s: 0.0,
        }
    }

    #[test]
    fn a_round_compares_each_server_of_two_with_the_one() {
        // One server: 1,000 events for 2 CPU s (2 s/1k). Two: 600 events for 1.5 s
        // (2.5 s/1k, 1.25 of one) and 600 for 1.2 s (2 s/1k, 1.00); 1,200 in all.
        let r = RoundRatios::of(&[
            phase(vec![server(1000, 2.0)]),
            phase(vec![server(600, 1.5), server(600, 1.2)]),
        ])
        .expect("both phases have events and CPU");
        assert!((r.total - 1.2).abs() < 1e-12, "{r:?}");
        assert!((r.per_event[0] - 1.25).abs() < 1e-12, "{r:?}");
        assert!((r.per_event[1] - 1.0).abs() < 1e-12, "{r:?}");
        assert_eq!(RoundRatios::of(&[phase(vec![server(0, 0.0)])]), None);
    }

    #[test]
    fn the_summary_gives_median_mean_and_range() {
        let rounds = [
            RoundRatios {
                total: 1.1,
                per_event: vec![0.9, 1.0],
            },
            RoundRatios {
                total: 0.9,
                per_event: vec![1.2, 1.1],
            },
            RoundRatios {
                total: 1.0,
                per_event: vec![1.0, 1.0],
            },
        ];
        let text = summary(&rounds);
        assert!(
            text.contains(
                "events/s over one server's: median 1.00, mean 1.00, range 0.90-1.10 (3 figures)"
            ),
            "{text}"
        );
        assert!(
            text.contains("median 1.00, mean 1.03, range 0.90-1.20 (6 figures)"),
            "{text}"
        );
    }

    #[test]
    fn a_process_cpu_time_is_read() {
        // This process has done some work by now.
        let mut x = 0u64;
        for i in 0..20_000_000u64 {
            x = x.wrapping_add(i * i);
        }
        assert!(x > 0);
        assert!(cpu_seconds(std::process::id()) > 0.0);
    }
}
