//! The `cairn` command line.

use crate::AppState;
use crate::accounts::audit::{Action, Actor, AuditEvent};
use crate::accounts::secret::{self, API_TOKEN_PREFIX, Secret, Token};
use crate::accounts::store::{NewApiToken, NewUser, SecretKind};
use crate::accounts::{Role, UserName};
use crate::config::Config;
use crate::demo::{self, DemoSpec};
use crate::import::{ImportError, ImportKind, MAX_ERRORS_SHOWN, import_csv};
use crate::master::{NewSite, SiteCode};
use crate::planning;
use crate::planning::plan::{Capacity, Fill};
use crate::store::Store;
use crate::store::{DbLocation, Synchronous};
use clap::{Args, Parser, Subcommand};
use std::net::SocketAddr;
use std::path::PathBuf;
use std::process::ExitCode;

mod out;
use out::{StdoutClosed, errln, out, outln};

#[derive(Parser)]
#[command(
    name = "cairn",
    version = crate::build_info::describe(),
    about = "Cycle counting that keeps stock records true"
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Create the demo site in FILE if it is new, then serve it.
    Demo {
        #[arg(long, default_value = "cairn-demo.db", env = "CAIRN_DB")]
        db: DbLocation,
        #[arg(long, default_value = "127.0.0.1:8080", env = "CAIRN_LISTEN")]
        listen: SocketAddr,
        /// Seed of the demo history (the same seed gives the same site).
        #[arg(long, default_value_t = 7)]
        seed: u64,
        /// Only the movements: no simulated weeks of counting (a quicker start).
        #[arg(long)]
        no_history: bool,
        /// A small site (60 items, 150 bins, 120 days, the last 4 weeks counted) that
        /// is made in a few seconds, for tests and a quick look.
        #[arg(long)]
        small: bool,
    },
    /// Serve an existing database.
    Serve(ServeArgs),
    /// Import a CSV file of items, bins, packs or movements into a site.
    Import {
        kind: ImportKind,
        #[arg(long, env = "CAIRN_DB")]
        db: DbLocation,
        #[arg(long)]
        site: String,
        path: PathBuf,
    },
    /// Generate a demo site of a chosen size (for benchmarks).
    DemoData {
        #[arg(long, env = "CAIRN_DB")]
        db: DbLocation,
        #[arg(long, default_value_t = 600)]
        items: u32,
        #[arg(long, default_value_t = 1500)]
        bins: u32,
        #[arg(long, default_value_t = 365)]
        days: u32,
        #[arg(long, default_value_t = 7)]
        seed: u64,
        #[arg(long, default_value = demo::DEMO_SITE)]
        site: String,
    },
    /// Check what a scanned code means (prints JSON; exits non-zero when invalid).
    Code {
        #[command(subcommand)]
        command: CodeCommand,
    },
    /// Write a printable SVG sheet of bin labels for a zone.
    Labels {
        #[arg(long, env = "CAIRN_DB")]
        db: DbLocation,
        /// The site; may be left out when the database holds one site.
        #[arg(long)]
        site: Option<String>,
        #[arg(long)]
        zone: String,
        /// Where to write the SVG (default: labels-SITE-ZONE.svg).
        #[arg(long)]
        out: Option<PathBuf>,
    },
    /// Build a day's count list and print it (text, CSV or JSON).
    Plan {
        #[arg(long, env = "CAIRN_DB")]
        db: DbLocation,
        #[arg(long)]
        site: String,
        /// The day, YYYY-MM-DD (default: today at the site, in its time zone).
        #[arg(long)]
        date: Option<chrono::NaiveDate>,
        #[arg(long, default_value_t = 2)]
        counters: u32,
        /// Minutes each counter has for counting.
        #[arg(long, default_value_t = 120)]
        minutes: u32,
        #[arg(long, value_enum, default_value_t = PlanFormat::Text)]
        format: PlanFormat,
        /// Use all the capacity instead of stopping at the day's level.
        #[arg(long)]
        fill_capacity: bool,
        /// Store the list as the day's list (replacing one not yet started).
        #[arg(long)]
        save: bool,
    },
    /// Replay a demo site's weeks with its injected record errors and count them
    /// under `abc` and `risk` side by side at the same minutes: week by week IRA, value
    /// accuracy, errors found, their value and age, and the planner's safety stock;
    /// writes an SVG chart of the error value each found. Needs the demo's shelf truth
    /// (a site made by `cairn demo` or `cairn demo-data`). Reads the database only.
    SimulateCounting {
        #[arg(long, env = "CAIRN_DB")]
        db: DbLocation,
        #[arg(long)]
        site: String,
        /// Weeks to simulate, from the site's today (1 to 520).
        #[arg(long, default_value_t = 12)]
        weeks: u32,
        /// Counter-minutes a working day, the same for both policies (1 to 48000).
        #[arg(long, default_value_t = 240)]
        minutes: u32,
        /// The policy proposed: both are always simulated; this one is marked `*` in the
        /// table and drawn heavier in the chart (`both`: neither is marked).
        #[arg(long, value_enum, default_value_t = ProposedPolicy::Both)]
        policy: ProposedPolicy,
        /// Seed of the error process (the same seed gives byte-identical output).
        #[arg(long, default_value_t = 22)]
        seed: u64,
        /// Runs this many seeds, from `--seed` on (1 to 100), and prints one line a seed
        /// and the verdicts over them all instead of the weeks of one (the chart is the
        /// first seed's).
        #[arg(long, default_value_t = 1)]
        seeds: u64,
        /// Least counts a year of class A, B, C under `risk`, as `blend` sets them
        /// (0: no floor), e.g. `--floors 12,4,1`.
        #[arg(long, value_delimiter = ',', default_values_t = [0, 0, 0])]
        floors: Vec<u32>,
        /// How `risk` models record error growing after a count: `jump` (errors arrive
        /// as rare jumps, a rate per item learned from its counts and its picks: what the
        /// day's list plans with) or `walk`
        /// (a random walk, variance growing linearly: the model the day's list planned with
        /// before the jump model).
        #[arg(long, value_enum, default_value_t = SimErrorModel::Jump)]
        error_model: SimErrorModel,
        /// How the weeks simulated spread errors among items: `uniform` (the demo's
        /// rates for every item) or `uneven` (those rates times a log-normal multiplier
        /// per item, mean 1, drawn from the seed).
        #[arg(long, value_enum, default_value_t = SimWorld::Uniform)]
        world: SimWorld,
        /// The run's first day, YYYY-MM-DD: demand is read over the 28 days before it and
        /// the book and shelf as they stand now (default: today at the site).
        #[arg(long)]
        start: Option<chrono::NaiveDate>,
        /// Where to write the SVG chart (default: `simulate-counting-SITE.svg` next to
        /// the database file, or in the current folder for a PostgreSQL URL).
        #[arg(long)]
        svg: Option<PathBuf>,
    },
    /// Print the accuracy report of a period, or the buffer of every item.
    Report {
        /// accuracy: IRA, value accuracy, adjustments, compliance, coverage;
        /// buffer: safety stock and order point with every term.
        what: ReportKind,
        #[arg(long, env = "CAIRN_DB")]
        db: DbLocation,
        #[arg(long)]
        site: String,
        /// First day, YYYY-MM-DD (accuracy: default 90 days before --until).
        #[arg(long)]
        since: Option<chrono::NaiveDate>,
        /// Last day, YYYY-MM-DD, a local day at the site (accuracy: default today; buffer:
        /// the last day of demand, default yesterday).
        #[arg(long)]
        until: Option<chrono::NaiveDate>,
        #[arg(long, value_enum, default_value_t = PlanFormat::Text)]
        format: PlanFormat,
    },
    /// Print how a count was netted: every key of the pass, with its window, opening,
    /// moves, feasible states, f*, variance, tolerance, verdict and settling.
    Net {
        #[arg(long, env = "CAIRN_DB")]
        db: DbLocation,
        /// The site; may be left out when the database holds one site.
        #[arg(long)]
        site: Option<String>,
        /// The count pass: its id or its uid.
        #[arg(long)]
        count: String,
        /// Print the results as JSON instead.
        #[arg(long)]
        json: bool,
    },
    /// Manage sites.
    Site {
        #[command(subcommand)]
        command: SiteCommand,
    },
    /// Manage users: make the first admin of a new site, reset a password or PIN.
    User {
        #[command(subcommand)]
        command: UserCommand,
    },
    /// Move a store onto another engine.
    Store {
        #[command(subcommand)]
        command: StoreCommand,
    },
    /// Copy the database while the server runs (SQLite's online backup), then check the copy.
    Backup {
        #[arg(long, env = "CAIRN_DB")]
        db: PathBuf,
        /// A new file, or a folder to hold cairn-YYYYMMDDTHHMMSS.sssZ.db.
        #[arg(long)]
        to: PathBuf,
        /// With a folder: keep only the newest N backups there.
        #[arg(long)]
        keep: Option<usize>,
    },
    /// Replace the database with a checked backup (stop the server first).
    Restore {
        /// The backup file.
        #[arg(long)]
        from: PathBuf,
        #[arg(long, env = "CAIRN_DB")]
        db: PathBuf,
        /// Replace an existing database file.
        #[arg(long)]
        force: bool,
    },
    /// Check one server's readiness over HTTP (for container health checks); exits 0 when ready.
    Probe {
        #[arg(default_value = "http://127.0.0.1:8080/readyz")]
        url: String,
    },
    /// Drive the sync endpoint of a fresh in-process server on loopback with N phones for a
    /// bounded time; print events/s, p50/p99 latency and the raw SQLite ceiling of the same rows.
    /// With `--db postgres://…`: one `cairn serve`, then two on disjoint sites, over a scratch
    /// database on that server (dropped after); events/s and each process's CPU per event.
    Loadtest {
        #[arg(long, default_value_t = 200)]
        phones: usize,
        /// A PostgreSQL server to compare one and two servers on (`postgres://…`; the role
        /// needs CREATEDB: the load runs in a scratch database of its own).
        #[arg(long)]
        db: Option<String>,
        /// Sites the phones are spread over (with --db).
        #[arg(long, default_value_t = 8)]
        sites: usize,
        #[arg(long, default_value_t = 20)]
        seconds: u64,
        /// Events per sync request.
        #[arg(long, default_value_t = 100)]
        batch: usize,
        #[arg(long, value_enum, default_value_t = Synchronous::Full)]
        synchronous: Synchronous,
        /// Each phone syncs once per this many ms (staggered); 0 sends back to back.
        #[arg(long, default_value_t = 0)]
        interval_ms: u64,
        /// With --db: run the one-server and two-server phases this many times in turn
        /// and end with the median and range of the ratios (1 to 20).
        #[arg(long, default_value_t = 1)]
        rounds: usize,
    },
    /// Check settings files.
    Config {
        #[command(subcommand)]
        command: ConfigCommand,
    },
    /// Write the API's OpenAPI 3.1 document (what `GET /api/v1/openapi.json` serves).
    Openapi {
        /// Where to write it (default: standard output).
        #[arg(long, value_name = "FILE")]
        out: Option<PathBuf>,
    },
    /// Print shell completions for cairn (save to your shell's completions folder).
    Completions { shell: CompletionShell },
    /// Print cairn's manual page (roff, for `man -l -` or a man1 folder).
    #[command(hide = true)]
    Man,
}

/// The shells `cairn completions` writes for.
#[derive(Clone, Copy, clap::ValueEnum)]
enum CompletionShell {
    Bash,
    Zsh,
    Fish,
}

/// Returns cairn's command definitions (for completions and the manual page).
pub fn definitions() -> clap::Command {
    <Cli as clap::CommandFactory>::command()
}

#[derive(Subcommand)]
enum ConfigCommand {
    /// Read a TOML settings file as `cairn serve --config` would, and print the result.
    Check { path: PathBuf },
}

#[derive(Clone, Copy, clap::ValueEnum)]
enum ReportKind {
    Accuracy,
    Buffer,
}

#[derive(Clone, Copy, clap::ValueEnum)]
enum ProposedPolicy {
    Abc,
    Risk,
    Both,
}

#[derive(Clone, Copy, clap::ValueEnum)]
enum SimErrorModel {
    Jump,
    Walk,
    Known,
}

#[derive(Clone, Copy, clap::ValueEnum)]
enum SimWorld {
    Uniform,
    Uneven,
}

#[derive(Clone, Copy, clap::ValueEnum)]
enum PlanFormat {
    Text,
    Csv,
    Json,
}

#[derive(Args)]
struct ServeArgs {
    #[arg(long, env = "CAIRN_DB")]
    db: Option<DbLocation>,
    #[arg(long, env = "CAIRN_LISTEN")]
    listen: Option<SocketAddr>,
    /// A TOML file of settings; flags and CAIRN_* variables override it.
    #[arg(long, env = "CAIRN_CONFIG")]
    config: Option<PathBuf>,
    /// SQLite durability at commit.
    #[arg(long, env = "CAIRN_SYNCHRONOUS")]
    synchronous: Option<Synchronous>,
    /// Mark session cookies Secure (true behind HTTPS, the default).
    #[arg(long, env = "CAIRN_SECURE_COOKIES")]
    secure_cookies: Option<bool>,
    /// Password and PIN hashes allowed at once (each holds 19 MiB); default 2 × cores.
    #[arg(long, env = "CAIRN_MAX_CONCURRENT_HASHES")]
    max_concurrent_hashes: Option<usize>,
    /// How long a sign-in waits for a turn to hash before a 429, in milliseconds.
    #[arg(long, env = "CAIRN_HASH_WAIT_MS")]
    hash_wait_ms: Option<u64>,
    /// Time to send a whole request head, and the most a connection stays idle, in milliseconds.
    #[arg(long, env = "CAIRN_REQUEST_HEAD_TIMEOUT_MS")]
    request_head_timeout_ms: Option<u64>,
    /// Time to send a whole request body after its head, in milliseconds.
    #[arg(long, env = "CAIRN_REQUEST_BODY_TIMEOUT_MS")]
    request_body_timeout_ms: Option<u64>,
}

#[derive(Subcommand)]
enum CodeCommand {
    /// Parse the text a scanner sends: GS1 element strings (GS as \x1d or the bracketed
    /// form), Digital Link URIs, GTINs, SSCCs and bin labels, with an optional AIM prefix.
    Parse { text: String },
}

#[derive(Subcommand)]
enum StoreCommand {
    /// Copy every site of a SQLite file onto an empty PostgreSQL database, or one site
    /// (--site) onto a database that may hold other sites; then read every table back and
    /// check it (the file is only read; stop the server that writes it).
    Copy {
        /// The SQLite file.
        #[arg(long)]
        from: PathBuf,
        /// The PostgreSQL database, `postgres://user@host/db` (empty, unless --site).
        #[arg(long)]
        to: String,
        /// Copy only this site, with fresh ids, onto a database that does not hold it
        /// yet; its people come along (one already there must be the same account).
        #[arg(long)]
        site: Option<String>,
    },
}

#[derive(Subcommand)]
enum SiteCommand {
    /// Create a site.
    Add {
        #[arg(long, env = "CAIRN_DB")]
        db: DbLocation,
        #[arg(long)]
        code: String,
        #[arg(long)]
        name: String,
        /// The site's IANA time zone (e.g. Europe/Berlin): its days are local days.
        #[arg(long, default_value = "UTC")]
        time_zone: String,
    },
    /// Change a site's time zone (audited). Stored lists keep their dates; from now on a
    /// day at the site is a local day of the new zone.
    Zone {
        #[arg(long, env = "CAIRN_DB")]
        db: DbLocation,
        #[arg(long)]
        code: String,
        /// The new IANA time zone (e.g. America/Chicago).
        #[arg(long)]
        time_zone: String,
    },
}

#[derive(Subcommand)]
enum UserCommand {
    /// Create a user with roles at a site. The password is asked for (or read
    /// from standard input with --password-stdin), never taken from the command line.
    Add {
        #[arg(long, env = "CAIRN_DB")]
        db: DbLocation,
        #[arg(long)]
        site: String,
        #[arg(long)]
        name: String,
        /// The name pages show (defaults to the user name).
        #[arg(long)]
        display_name: Option<String>,
        /// Comma-separated: counter, supervisor, inventory_manager, planner, admin.
        #[arg(long)]
        roles: String,
        /// Also set a phone PIN (with --password-stdin: the second line).
        #[arg(long)]
        with_pin: bool,
        /// Read the secret(s) from standard input, one per line, for scripts.
        #[arg(long)]
        password_stdin: bool,
    },
    /// Set a user's password (ending their web sessions), or with --pin their phone PIN.
    Passwd {
        #[arg(long, env = "CAIRN_DB")]
        db: DbLocation,
        #[arg(long)]
        name: String,
        /// Set the phone PIN instead of the password.
        #[arg(long)]
        pin: bool,
        /// Read the secret from standard input, for scripts.
        #[arg(long)]
        password_stdin: bool,
    },
    /// Issue an integration token for a host system, acting as a user with one
    /// role at a site. The token is printed once; only its digest is kept.
    Token {
        #[arg(long, env = "CAIRN_DB")]
        db: DbLocation,
        #[arg(long)]
        site: String,
        #[arg(long)]
        name: String,
        #[arg(long)]
        role: String,
        /// What the token is for, as the admin page lists it.
        #[arg(long, default_value = "integration")]
        label: String,
    },
    /// Replace a user's roles at a site (an empty list removes them from it).
    Roles {
        #[arg(long, env = "CAIRN_DB")]
        db: DbLocation,
        #[arg(long)]
        site: String,
        #[arg(long)]
        name: String,
        /// Comma-separated roles, e.g. "counter,supervisor"; "" for none.
        #[arg(long)]
        set: String,
    },
}

/// Runs the command line and returns the process exit code.
pub fn main() -> ExitCode {
    let cli = Cli::parse();
    init_logs(default_log_filter(&cli.command));
    let rt = match tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()
    {
        Ok(rt) => rt,
        Err(e) => {
            errln!("cairn: cannot start the async runtime: {e}");
            return ExitCode::FAILURE;
        }
    };
    match rt.block_on(dispatch(cli.command)) {
        Ok(()) => ExitCode::SUCCESS,
        // The reader took what it wanted (`cairn plan | head -1`): nothing to report.
        Err(e) if e.is::<StdoutClosed>() => ExitCode::SUCCESS,
        Err(e) => {
            errln!("cairn: {e:#}");
            ExitCode::FAILURE
        }
    }
}

/// Returns the log levels a command starts with when `RUST_LOG` does not set them.
/// `loadtest` serves thousands of requests in its own process, and a line for each
/// would bury its result, so it logs warnings and errors only.
fn default_log_filter(command: &Command) -> &'static str {
    match command {
        Command::Loadtest { .. } => "warn",
        _ => "info,tower_http=warn",
    }
}

/// Logs go to standard error: plain text, or one JSON object a line when
/// `CAIRN_LOG_FORMAT=json` (for journald or a log shipper). `RUST_LOG` sets the levels,
/// else `default_filter`.
fn init_logs(default_filter: &str) {
    let filter = tracing_subscriber::EnvFilter::try_from_default_env()
        .unwrap_or_else(|_| default_filter.into());
    let json = std::env::var("CAIRN_LOG_FORMAT").is_ok_and(|v| v.eq_ignore_ascii_case("json"));
    let builder = tracing_subscriber::fmt()
        .with_env_filter(filter)
        .with_writer(std::io::stderr);
    if json {
        builder.json().flatten_event(true).init();
    } else {
        builder.init();
    }
}

fn open(db: DbLocation) -> anyhow::Result<AppState> {
    AppState::open(Config {
        db,
        ..Config::default()
    })
}

/// Returns the site named by `--site`, or the only site when the database holds one.
async fn named_or_only_site(
    store: &dyn Store,
    code: Option<String>,
) -> anyhow::Result<crate::master::Site> {
    match code {
        Some(code) => site_of(store, &code).await,
        None => match store.sites().await?.as_slice() {
            [only] => Ok(only.clone()),
            _ => anyhow::bail!("this database holds several sites: name one with --site"),
        },
    }
}

async fn site_of(store: &dyn Store, code: &str) -> anyhow::Result<crate::master::Site> {
    let code = SiteCode::parse(code)?;
    store.site(&code).await?.ok_or_else(|| {
        anyhow::anyhow!("no site '{code}' in this database (create it with `cairn site add`)")
    })
}

async fn dispatch(command: Command) -> anyhow::Result<()> {
    match command {
        Command::Demo {
            db,
            listen,
            seed,
            no_history,
            small,
        } => {
            let fresh = db.is_new();
            let state = AppState::open(Config {
                db: db.clone(),
                listen,
                // The demo is plain HTTP on loopback: a Secure cookie would not be sent.
                secure_cookies: false,
                ..Config::default()
            })?;
            if fresh || state.store.sites().await?.is_empty() {
                errln!("Creating the demo site in {db} (seed {seed}) ...");
                let spec = match (small, no_history) {
                    (true, no_history) => DemoSpec {
                        history_weeks: if no_history { 0 } else { 4 },
                        ..DemoSpec::small(seed)
                    },
                    (false, true) => DemoSpec::standard(seed),
                    (false, false) => DemoSpec::standard(seed).with_history(),
                };
                let summary = demo::generate(state.store.as_ref(), &spec, true).await?;
                errln!("{summary}");
            }
            let site = site_of(state.store.as_ref(), demo::DEMO_SITE).await?;
            demo::create_demo_users(state.store.as_ref(), &site).await?;
            match demo::accounts::todays_list(state.store.as_ref(), &site).await {
                Ok(tasks) => errln!(
                    "Today's count list: {tasks} bins, runs held by {}",
                    demo::accounts::DEMO_COUNTERS.join(" and ")
                ),
                Err(e) => errln!("Today's count list was not built: {e:#}"),
            }
            serve(state, listen, true).await
        }
        Command::Serve(args) => {
            let mut config = match &args.config {
                Some(path) => Config::from_file(path)?,
                None => Config::default(),
            };
            if let Some(db) = args.db {
                config.db = db;
            }
            if let Some(l) = args.listen {
                config.listen = l;
            }
            if let Some(s) = args.synchronous {
                config.synchronous = s;
            }
            if let Some(s) = args.secure_cookies {
                config.secure_cookies = s;
            }
            if let Some(n) = args.max_concurrent_hashes {
                config.max_concurrent_hashes = n;
            }
            if let Some(ms) = args.hash_wait_ms {
                config.hash_wait_ms = ms;
            }
            if let Some(ms) = args.request_head_timeout_ms {
                config.request_head_timeout_ms = ms;
            }
            if let Some(ms) = args.request_body_timeout_ms {
                config.request_body_timeout_ms = ms;
            }
            config.check()?;
            config
                .db
                .must_exist("create one with `cairn demo` or `cairn site add`")?;
            let listen = config.listen;
            serve(AppState::open(config)?, listen, false).await
        }
        Command::Import {
            kind,
            db,
            site,
            path,
        } => {
            let state = open(db)?;
            let site = site_of(state.store.as_ref(), &site).await?;
            let audit = AuditEvent::now(Actor::Cli, Action::Import, path.display().to_string())
                .at_site(site.id);
            match import_csv(state.store.as_ref(), &site, kind, &path, true, Some(audit)).await {
                Ok(s) => {
                    outln!(
                        "{}: {} rows read, {} written, {} already recorded",
                        path.display(),
                        s.rows,
                        s.written,
                        s.already_recorded
                    )?;
                    Ok(())
                }
                Err(ImportError::Lines(lines)) => {
                    for l in lines.iter().take(MAX_ERRORS_SHOWN) {
                        errln!("{}: {l}", path.display());
                    }
                    if lines.len() > MAX_ERRORS_SHOWN {
                        errln!("... and {} more", lines.len() - MAX_ERRORS_SHOWN);
                    }
                    anyhow::bail!("{} line(s) refused; nothing was written", lines.len())
                }
                Err(e) => Err(e.into()),
            }
        }
        Command::DemoData {
            db,
            items,
            bins,
            days,
            seed,
            site,
        } => {
            let state = open(db)?;
            let spec = DemoSpec {
                items,
                bins,
                days,
                seed,
                site_code: SiteCode::parse(&site)?,
                ..DemoSpec::standard(seed)
            };
            let summary = demo::generate(state.store.as_ref(), &spec, true).await?;
            outln!("{summary}")?;
            Ok(())
        }
        Command::Code {
            command: CodeCommand::Parse { text },
        } => {
            let text = text.replace("\\x1d", "\u{1d}").replace("\\x1D", "\u{1d}");
            let year = u16::try_from(chrono::Datelike::year(&chrono::Utc::now())).unwrap_or(2000);
            let scanned = cairn_scan::parse(&text, year).map_err(|e| anyhow::anyhow!("{e}"))?;
            outln!("{}", serde_json::to_string_pretty(&scanned)?)?;
            Ok(())
        }
        Command::Labels {
            db,
            site,
            zone,
            out,
        } => {
            let state = open(db)?;
            let site = named_or_only_site(state.store.as_ref(), site).await?;
            let zone = crate::master::codes::ZoneCode::parse(&zone)?;
            let bins = state.store.bins(site.id, Some(zone.clone())).await?;
            anyhow::ensure!(
                !bins.is_empty(),
                "zone {zone} of site {} has no bins",
                site.code
            );
            let labels = bins
                .iter()
                .map(|b| b.label(&site.code))
                .collect::<Result<Vec<_>, _>>()
                .map_err(|e| anyhow::anyhow!("{e}"))?;
            let svg = cairn_scan::label_sheet_svg(&labels, &format!("{} — zone {zone}", site.name));
            let out =
                out.unwrap_or_else(|| PathBuf::from(format!("labels-{}-{zone}.svg", site.code)));
            std::fs::write(&out, svg)
                .map_err(|e| anyhow::anyhow!("cannot write {}: {e}", out.display()))?;
            outln!("{} labels written to {}", labels.len(), out.display())?;
            Ok(())
        }
        Command::Plan {
            db,
            site,
            date,
            counters,
            minutes,
            format,
            fill_capacity,
            save,
        } => {
            db.must_exist("")?;
            let state = open(db)?;
            let store = state.store.as_ref();
            let site = site_of(store, &site).await?;
            let day = date.unwrap_or_else(|| site.time_zone.today());
            let capacity = Capacity { counters, minutes };
            planning::service::check_capacity(capacity).map_err(anyhow::Error::msg)?;
            let fill = if fill_capacity {
                Fill::Capacity
            } else {
                Fill::Level
            };
            let view = if save {
                planning::service::build(store, &site, day, capacity, fill, true).await?
            } else {
                let (input, plan) =
                    planning::service::preview(store, &site, day, capacity, fill).await?;
                planning::service::view(&input, &plan)
            };
            match format {
                PlanFormat::Text => out!("{}", planning::service::to_text(&view))?,
                PlanFormat::Csv => out!("{}", planning::service::to_csv(&view)?)?,
                PlanFormat::Json => outln!("{}", serde_json::to_string_pretty(&view)?)?,
            }
            Ok(())
        }
        Command::SimulateCounting {
            db,
            site,
            weeks,
            minutes,
            policy,
            seed,
            floors,
            error_model,
            world,
            start,
            svg,
            seeds,
        } => {
            use crate::planning::simulate::{ErrorModel, Policy, report};
            if !(1..=report::MAX_SEEDS).contains(&seeds) {
                anyhow::bail!("--seeds {seeds}: give 1 to {} seeds", report::MAX_SEEDS);
            }
            let Some(last_seed) = seed.checked_add(seeds - 1) else {
                anyhow::bail!(
                    "--seed {seed} --seeds {seeds}: the last seed is past {}",
                    u64::MAX
                );
            };
            db.must_exist("")?;
            let floors: [u32; 3] = floors
                .try_into()
                .map_err(|_| anyhow::anyhow!("--floors takes three numbers: A,B,C"))?;
            let svg = svg.unwrap_or_else(|| {
                let name = format!("simulate-counting-{site}.svg");
                match &db {
                    DbLocation::File(path) => path
                        .parent()
                        .map_or_else(|| PathBuf::from(&name), |d| d.join(&name)),
                    _ => PathBuf::from(&name),
                }
            });
            let state = open(db)?;
            let store = state.store.as_ref();
            let site = site_of(store, &site).await?;
            let spec = demo::replay::ReplaySpec {
                weeks,
                minutes,
                seed,
                floors,
                start,
                show: std::io::IsTerminal::is_terminal(&std::io::stderr()),
                model: match error_model {
                    SimErrorModel::Jump => ErrorModel::Jump,
                    SimErrorModel::Walk => ErrorModel::Walk,
                    SimErrorModel::Known => ErrorModel::Known,
                },
                world: match world {
                    SimWorld::Uniform => demo::replay::WorldKind::Uniform,
                    SimWorld::Uneven => demo::replay::WorldKind::Uneven,
                },
            };
            let run = demo::replay::replay(store, &site, &spec).await?;
            let shown = match policy {
                ProposedPolicy::Abc => report::Shown::Proposal(Policy::Abc),
                ProposedPolicy::Risk => report::Shown::Proposal(Policy::Risk),
                ProposedPolicy::Both => report::Shown::Both,
            };
            let title = format!(
                "Error value found, cumulative: abc and risk at {minutes} counter-minutes a working day ({})",
                site.code
            );
            std::fs::write(&svg, report::svg(&run.rows, shown, &title))
                .map_err(|e| anyhow::anyhow!("cannot write the chart to {}: {e}", svg.display()))?;
            out!("{}", run.preamble(site.code.as_str(), &spec))?;
            if seeds == 1 {
                out!("{}", report::table(&run.rows, shown))?;
                out!("{}", run.note())?;
            } else {
                let mut rows = Vec::with_capacity(seeds as usize);
                let totals = |rows: &[crate::planning::simulate::WeekRow], seed| report::SeedRow {
                    seed,
                    abc: report::totals(rows, Policy::Abc),
                    risk: report::totals(rows, Policy::Risk),
                };
                rows.push(totals(&run.rows, seed));
                for s in seed + 1..=last_seed {
                    let more = demo::replay::replay(
                        store,
                        &site,
                        &demo::replay::ReplaySpec {
                            seed: s,
                            ..spec.clone()
                        },
                    )
                    .await?;
                    rows.push(totals(&more.rows, s));
                }
                outln!(
                    "seeds {seed} to {last_seed}: the lines above are seed {seed}'s; each seed draws its own errors"
                )?;
                out!("{}", report::seeds_table(&rows))?;
            }
            outln!("chart written to {}", svg.display())?;
            Ok(())
        }
        Command::Net {
            db,
            site,
            count,
            json,
        } => {
            db.must_exist("")?;
            let pass =
                crate::netting::results::PassRef::parse(&count).map_err(|e| anyhow::anyhow!(e))?;
            let state = open(db)?;
            let site = named_or_only_site(state.store.as_ref(), site).await?;
            let report = state
                .store
                .count_pass_report(site.id, pass)
                .await?
                .ok_or_else(|| {
                    anyhow::anyhow!("no count pass with id or uid '{count}' at {}", site.code)
                })?;
            if json {
                outln!("{}", serde_json::to_string_pretty(&report)?)?;
            } else {
                out!(
                    "{}",
                    crate::netting::report::to_text(&report, crate::time::Timestamp::now())
                )?;
            }
            Ok(())
        }
        Command::Site {
            command:
                SiteCommand::Add {
                    db,
                    code,
                    name,
                    time_zone,
                },
        } => {
            let state = open(db)?;
            let site = state
                .store
                .create_site(NewSite {
                    code: SiteCode::parse(&code)?,
                    name: crate::input::text::field(
                        "--name",
                        crate::input::text::Kind::Label,
                        &name,
                    )
                    .map_err(anyhow::Error::msg)?,
                    time_zone: crate::time::day::SiteZone::parse(&time_zone)?,
                })
                .await?;
            outln!("site {} created ({})", site.code, site.time_zone)?;
            Ok(())
        }
        Command::Site {
            command:
                SiteCommand::Zone {
                    db,
                    code,
                    time_zone,
                },
        } => {
            let zone = crate::time::day::SiteZone::parse(&time_zone)?;
            db.must_exist("")?;
            let state = open(db)?;
            let site = site_of(state.store.as_ref(), &code).await?;
            let audit = AuditEvent::now(Actor::Cli, Action::SiteZoneChanged, site.code.as_str())
                .at_site(site.id);
            let was = state.store.set_site_zone(site.id, zone, audit).await?;
            outln!(
                "site {}: time zone {was} -> {zone}; today there is {}",
                site.code,
                zone.today()
            )?;
            Ok(())
        }
        Command::User { command } => user_command(command).await,
        Command::Store {
            command: StoreCommand::Copy { from, to, site },
        } => {
            let target = DbLocation::parse(&to).map_err(anyhow::Error::msg)?;
            let DbLocation::Postgres(url) = &target else {
                anyhow::bail!("--to must be a postgres:// URL, not {target}");
            };
            let site = site
                .map(|c| crate::master::SiteCode::parse(&c).map_err(anyhow::Error::msg))
                .transpose()?;
            let pb = if std::io::IsTerminal::is_terminal(&std::io::stderr()) {
                let pb = indicatif::ProgressBar::new(0);
                pb.set_style(
                    indicatif::ProgressStyle::with_template(
                        "{elapsed:>4} [{bar:30}] {pos}/{len} rows {msg}",
                    )
                    .expect("the template is a fixed, valid string"),
                );
                pb
            } else {
                indicatif::ProgressBar::hidden()
            };
            let report = match &site {
                None => crate::store::copy::copy(&from, url, &pb).await,
                Some(code) => crate::store::copy::copy_site(&from, url, code, &pb).await,
            };
            pb.finish_and_clear();
            let report = report?;
            outln!("copied {} to {target}: {report}", from.display())?;
            Ok(())
        }
        Command::Backup { db, to, keep } => {
            sqlite_only(&db, "backup")?;
            let report = tokio::task::spawn_blocking(move || {
                crate::backup::with_spinner(|p| crate::backup::backup(&db, &to, keep, p))
            })
            .await??;
            outln!("backup {report}")?;
            Ok(())
        }
        Command::Restore { from, db, force } => {
            sqlite_only(&db, "restore")?;
            let report = tokio::task::spawn_blocking(move || {
                crate::backup::with_spinner(|p| crate::backup::restore(&from, &db, force, p))
            })
            .await??;
            outln!("restored {report}")?;
            Ok(())
        }
        Command::Probe { url } => probe(&url).await,
        Command::Loadtest {
            phones,
            db: Some(url),
            sites,
            seconds,
            batch,
            interval_ms,
            rounds,
            ..
        } => {
            anyhow::ensure!(
                (1..=crate::loadtest::servers::MAX_ROUNDS).contains(&rounds),
                "--rounds is 1 to {} (got {rounds})",
                crate::loadtest::servers::MAX_ROUNDS
            );
            anyhow::ensure!(
                matches!(
                    DbLocation::parse(&url).map_err(anyhow::Error::msg)?,
                    DbLocation::Postgres(_)
                ),
                "loadtest --db takes a PostgreSQL URL (postgres://…); without --db it runs on a \
                 scratch SQLite file"
            );
            let spec = crate::loadtest::servers::ServersSpec {
                url,
                phones,
                sites,
                seconds,
                batch,
                interval: std::time::Duration::from_millis(interval_ms),
            };
            let mut ratios = Vec::new();
            for round in 1..=rounds {
                if rounds > 1 {
                    outln!("round {round} of {rounds}")?;
                }
                let phases = crate::loadtest::servers::run(spec.clone()).await?;
                out!("{}", crate::loadtest::servers::report(&spec, &phases))?;
                ratios.extend(crate::loadtest::servers::RoundRatios::of(&phases));
            }
            if rounds > 1 {
                out!("{}", crate::loadtest::servers::summary(&ratios))?;
            }
            Ok(())
        }
        Command::Loadtest {
            phones,
            seconds,
            batch,
            synchronous,
            interval_ms,
            rounds,
            ..
        } => {
            anyhow::ensure!(
                rounds == 1,
                "--rounds compares one and two servers on PostgreSQL: it needs --db postgres://…"
            );
            let outcome = crate::loadtest::run(crate::loadtest::Spec {
                phones,
                seconds,
                batch,
                synchronous,
                interval: std::time::Duration::from_millis(interval_ms),
            })
            .await?;
            outln!(
                "{phones} phones, {batch} events a request, interval {interval_ms} ms, synchronous={synchronous:?}"
            )?;
            outln!("{outcome}")?;
            Ok(())
        }
        Command::Config {
            command: ConfigCommand::Check { path },
        } => {
            let config = Config::from_file(&path)?;
            outln!("{config:#?}")?;
            Ok(())
        }
        Command::Completions { shell } => {
            let shell = match shell {
                CompletionShell::Bash => clap_complete::Shell::Bash,
                CompletionShell::Zsh => clap_complete::Shell::Zsh,
                CompletionShell::Fish => clap_complete::Shell::Fish,
            };
            let mut script = Vec::new();
            clap_complete::generate(shell, &mut definitions(), "cairn", &mut script);
            out!("{}", String::from_utf8_lossy(&script))
        }
        Command::Openapi { out } => {
            let doc = crate::http::openapi::document();
            if !doc.undocumented.is_empty() {
                anyhow::bail!(
                    "routes without documentation: {}",
                    doc.undocumented.join(", ")
                );
            }
            let text = serde_json::to_string_pretty(&doc.json)? + "\n";
            match out {
                Some(path) => std::fs::write(&path, text)
                    .map_err(|e| anyhow::anyhow!("cannot write {}: {e}", path.display())),
                None => out!("{text}"),
            }
        }
        Command::Man => {
            let mut page = Vec::new();
            clap_mangen::Man::new(definitions()).render(&mut page)?;
            out!("{}", String::from_utf8_lossy(&page))
        }
        Command::Report {
            what,
            db,
            site,
            since,
            until,
            format,
        } => report(what, db, site, since, until, format).await,
    }
}

/// Sends one GET to a plain-HTTP URL on this host and fails unless it answers 2xx.
async fn probe(url: &str) -> anyhow::Result<()> {
    use tokio::io::{AsyncReadExt, AsyncWriteExt};
    let rest = url
        .strip_prefix("http://")
        .ok_or_else(|| anyhow::anyhow!("probe takes an http:// URL, not {url}"))?;
    let (host, path) = match rest.find('/') {
        Some(i) => (&rest[..i], &rest[i..]),
        None => (rest, "/"),
    };
    let work = async {
        let mut conn = tokio::net::TcpStream::connect(host).await?;
        conn.write_all(format!("GET {path} HTTP/1.0\r\nHost: {host}\r\n\r\n").as_bytes())
            .await?;
        let mut head = vec![0u8; 64];
        let n = conn.read(&mut head).await?;
        Ok::<_, std::io::Error>(String::from_utf8_lossy(&head[..n]).to_string())
    };
    let head = tokio::time::timeout(std::time::Duration::from_secs(5), work)
        .await
        .map_err(|_| anyhow::anyhow!("{url} did not answer within 5 s"))?
        .map_err(|e| anyhow::anyhow!("{url}: {e}"))?;
    let status = head.split_whitespace().nth(1).unwrap_or("");
    anyhow::ensure!(status.starts_with('2'), "{url} answered {status}");
    outln!("{url}: {status}")?;
    Ok(())
}

async fn report(
    what: ReportKind,
    db: DbLocation,
    site: String,
    since: Option<chrono::NaiveDate>,
    until: Option<chrono::NaiveDate>,
    format: PlanFormat,
) -> anyhow::Result<()> {
    use crate::accuracy::report as table;
    use crate::accuracy::service;
    db.must_exist("")?;
    let state = open(db)?;
    let store = state.store.as_ref();
    let site = site_of(store, &site).await?;
    let public = |e: crate::error::ApiError| anyhow::anyhow!("{}", e.public_text());
    let tables = match what {
        ReportKind::Accuracy => {
            let period =
                service::Period::new(since, until, service::DEFAULT_PERIOD_DAYS, site.time_zone)
                    .map_err(anyhow::Error::msg)?;
            let r = service::accuracy_report(store, &site, period, service::Filter::default())
                .await
                .map_err(public)?;
            if let PlanFormat::Json = format {
                outln!("{}", serde_json::to_string_pretty(&r)?)?;
                return Ok(());
            }
            table::ACCURACY_TABLES
                .iter()
                .filter_map(|name| table::accuracy_table(&r, name))
                .collect::<Vec<_>>()
        }
        ReportKind::Buffer => {
            if since.is_some() {
                anyhow::bail!(
                    "--since is for the accuracy report; the buffer's window is the site's demand window up to --until"
                );
            }
            let settings = store.accuracy_settings(site.id).await?;
            let window = service::DemandWindow::new(until, None, &settings, site.time_zone)
                .map_err(anyhow::Error::msg)?;
            let r = service::buffer_reports(store, &site, window, None, None)
                .await
                .map_err(public)?;
            if let PlanFormat::Json = format {
                outln!("{}", serde_json::to_string_pretty(&r)?)?;
                return Ok(());
            }
            vec![table::buffer_table(&r)]
        }
    };
    for (i, t) in tables.iter().enumerate() {
        match format {
            PlanFormat::Csv => {
                // Several tables in one CSV stream are separated by a blank line.
                if i > 0 {
                    outln!()?;
                }
                out!("{}", table::to_csv(t)?)?;
            }
            _ => {
                if i > 0 {
                    outln!()?;
                }
                out!("{}", table::to_text(t))?;
            }
        }
    }
    Ok(())
}

async fn serve(state: AppState, listen: SocketAddr, demo: bool) -> anyhow::Result<()> {
    let listener = tokio::net::TcpListener::bind(listen)
        .await
        .map_err(|e| anyhow::anyhow!("cannot listen on {listen}: {e}"))?;
    let addr = listener.local_addr()?;
    // A server keeps serving when nobody reads its banner (`cairn demo | head -1`).
    let banner = outln!("Cairn is serving {} at http://{addr}/", state.config.db);
    if demo && banner.is_ok() {
        let _ = outln!("{}", demo::login_note());
    }
    tokio::spawn(planning::service::nightly_classification(
        state.store.clone(),
    ));
    tokio::spawn(settle_results(state.store.clone()));
    crate::run(state, listener, shutdown_signal()).await?;
    Ok(())
}

/// Refuses a PostgreSQL URL where a command copies the SQLite file.
fn sqlite_only(db: &std::path::Path, command: &str) -> anyhow::Result<()> {
    if matches!(
        DbLocation::parse(&db.to_string_lossy()),
        Ok(DbLocation::Postgres(_))
    ) {
        anyhow::bail!(
            "cairn {command} copies a SQLite file; back up PostgreSQL with its own tools \
             (pg_dump, pg_basebackup: deploy/postgres/README.md)"
        );
    }
    Ok(())
}

/// How often `cairn serve` marks results whose settling instant has passed.
const SETTLE_EVERY: std::time::Duration = std::time::Duration::from_secs(60);

/// Marks settled results once a minute and posts the automatic count adjustments then due
/// (sites that allow them). Reads already treat a passed settling instant as settled; the
/// stored flag keeps its index current, and a result is adjusted automatically at most a
/// minute after it settles.
async fn settle_results(store: std::sync::Arc<dyn Store>) {
    let mut tick = tokio::time::interval(SETTLE_EVERY);
    loop {
        tick.tick().await;
        match crate::writes::settle(store.as_ref(), crate::time::Timestamp::now()).await {
            Ok(o) if !o.adjusted.is_empty() => {
                tracing::info!(
                    "posted {} automatic count adjustments within tolerance",
                    o.adjusted.len()
                );
            }
            Ok(_) => {}
            Err(e) => tracing::warn!("settling count results failed: {e}"),
        }
    }
}

/// Resolves on Ctrl-C or SIGTERM (what systemd and container engines send to stop).
async fn shutdown_signal() {
    let term = async {
        match tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()) {
            Ok(mut s) => {
                s.recv().await;
            }
            Err(_) => std::future::pending::<()>().await,
        }
    };
    tokio::select! {
        _ = tokio::signal::ctrl_c() => {}
        _ = term => {}
    }
    tracing::info!("stopping: finishing the requests in flight");
}

/// Reads `n` secrets: from standard input, one per line, or by prompting
/// twice each without echo. Never from the command line, where `ps` shows them.
fn read_secrets(what: &[&str], from_stdin: bool) -> anyhow::Result<Vec<Secret>> {
    let mut out = Vec::new();
    if from_stdin {
        let mut lines = std::io::stdin().lines();
        for w in what {
            let line = lines
                .next()
                .ok_or_else(|| anyhow::anyhow!("standard input ended before the {w}"))??;
            out.push(Secret::new(line.trim_end_matches(['\r', '\n'])));
        }
        return Ok(out);
    }
    for w in what {
        let first = rpassword::prompt_password(format!("New {w}: "))?;
        let again = rpassword::prompt_password(format!("The {w} again: "))?;
        anyhow::ensure!(first == again, "the two {w}s differ; nothing was changed");
        out.push(Secret::new(first));
    }
    Ok(out)
}

async fn user_command(command: UserCommand) -> anyhow::Result<()> {
    match command {
        UserCommand::Add {
            db,
            site,
            name,
            display_name,
            roles,
            with_pin,
            password_stdin,
        } => {
            let state = open(db)?;
            let site = site_of(state.store.as_ref(), &site).await?;
            let name = UserName::parse(&name).map_err(anyhow::Error::msg)?;
            let roles = Role::parse_list(&roles).map_err(anyhow::Error::msg)?;
            anyhow::ensure!(!roles.is_empty(), "name at least one role with --roles");
            let display_name = display_name
                .map(|d| {
                    crate::input::text::field("--display-name", crate::input::text::Kind::Name, &d)
                })
                .transpose()
                .map_err(anyhow::Error::msg)?
                .filter(|d| !d.is_empty());
            let what: &[&str] = if with_pin {
                &["password", "PIN"]
            } else {
                &["password"]
            };
            let mut secrets = read_secrets(what, password_stdin)?.into_iter();
            let password = secrets
                .next()
                .expect("read_secrets returns one secret per name");
            password.check_password().map_err(anyhow::Error::msg)?;
            let pin = secrets.next();
            if let Some(p) = &pin {
                p.check_pin().map_err(anyhow::Error::msg)?;
            }
            let password = secret::hash(password).await?;
            let pin = match pin {
                Some(p) => Some(secret::hash(p).await?),
                None => None,
            };
            let audit =
                AuditEvent::now(Actor::Cli, Action::UserCreated, name.as_str()).at_site(site.id);
            let user = state
                .store
                .create_user(
                    NewUser {
                        display_name: display_name.unwrap_or_else(|| name.to_string()),
                        name,
                        password,
                        pin,
                        roles: roles.iter().map(|r| (site.id, *r)).collect(),
                    },
                    audit,
                )
                .await?;
            let labels: Vec<&str> = roles.iter().map(|r| r.label()).collect();
            outln!(
                "user {} created at site {} ({})",
                user.name,
                site.code,
                labels.join(", ")
            )?;
            Ok(())
        }
        UserCommand::Passwd {
            db,
            name,
            pin,
            password_stdin,
        } => {
            let state = open(db)?;
            let name = UserName::parse(&name).map_err(anyhow::Error::msg)?;
            let (kind, what, action) = if pin {
                (SecretKind::Pin, "PIN", Action::PinChanged)
            } else {
                (SecretKind::Password, "password", Action::PasswordChanged)
            };
            let secret = read_secrets(&[what], password_stdin)?
                .pop()
                .expect("read_secrets returns one secret per name");
            match kind {
                SecretKind::Pin => secret.check_pin(),
                SecretKind::Password => secret.check_password(),
            }
            .map_err(anyhow::Error::msg)?;
            let hash = secret::hash(secret).await?;
            state
                .store
                .set_secret(
                    &name,
                    kind,
                    hash,
                    AuditEvent::now(Actor::Cli, action, name.as_str()),
                )
                .await?;
            outln!("{what} of {name} changed")?;
            Ok(())
        }
        UserCommand::Token {
            db,
            site,
            name,
            role,
            label,
        } => {
            let state = open(db)?;
            let site = site_of(state.store.as_ref(), &site).await?;
            let user = UserName::parse(&name).map_err(anyhow::Error::msg)?;
            let role = Role::parse(&role).map_err(anyhow::Error::msg)?;
            let token = Token::generate(API_TOKEN_PREFIX);
            let audit = AuditEvent::now(Actor::Cli, Action::ApiTokenIssued, "").at_site(site.id);
            state
                .store
                .issue_api_token(
                    NewApiToken {
                        user,
                        site: site.id,
                        role,
                        name: crate::input::text::field(
                            "--label",
                            crate::input::text::Kind::Name,
                            &label,
                        )
                        .map_err(anyhow::Error::msg)?,
                        token_digest: token.digest(),
                        at: crate::time::Timestamp::now(),
                    },
                    audit,
                )
                .await?;
            // The token goes to standard output alone, so a script can capture it.
            outln!("{}", token.expose())?;
            Ok(())
        }
        UserCommand::Roles {
            db,
            site,
            name,
            set,
        } => {
            let state = open(db)?;
            let site = site_of(state.store.as_ref(), &site).await?;
            let name = UserName::parse(&name).map_err(anyhow::Error::msg)?;
            let roles = Role::parse_list(&set).map_err(anyhow::Error::msg)?;
            let audit =
                AuditEvent::now(Actor::Cli, Action::RolesChanged, name.as_str()).at_site(site.id);
            state
                .store
                .set_roles(&name, site.id, roles.clone(), audit)
                .await?;
            let labels: Vec<&str> = roles.iter().map(|r| r.label()).collect();
            outln!(
                "{name} at site {}: {}",
                site.code,
                if labels.is_empty() {
                    "no role".to_string()
                } else {
                    labels.join(", ")
                }
            )?;
            Ok(())
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn loadtest_logs_warnings_only_unless_told_and_other_commands_log_requests() {
        let filter = |args: &[&str]| {
            let cli = Cli::try_parse_from(args).expect("the arguments parse");
            default_log_filter(&cli.command)
        };
        assert_eq!(filter(&["cairn", "loadtest", "--phones", "2"]), "warn");
        assert_eq!(
            filter(&["cairn", "serve", "--db", "x.db"]),
            "info,tower_http=warn"
        );
    }
}
