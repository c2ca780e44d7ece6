//! The `cairn` command line.

use crate::AppState;
use crate::config::Config;
use crate::demo::{self, DemoSpec};
use crate::import::{ImportError, ImportKind, MAX_ERRORS_SHOWN, import_csv};
use crate::master::{NewSite, SiteCode};
use crate::planning;
use crate::planning::plan::{Capacity, Fill};
use crate::store::Store;
use crate::store::sqlite::Synchronous;
use clap::{Args, Parser, Subcommand};
use std::net::SocketAddr;
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(Parser)]
#[command(
    name = "cairn",
    version,
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
        db: PathBuf,
        #[arg(long, default_value = "127.0.0.1:8080", env = "CAIRN_LISTEN")]
        listen: SocketAddr,
        /// Seed of the demo history (the same seed gives the same site).
        #[arg(long, default_value_t = 7)]
        seed: u64,
    },
    /// Serve an existing database.
    Serve(ServeArgs),
    /// Import a CSV file of items, bins, packs or movements into a site.
    Import {
        kind: ImportKind,
        #[arg(long, env = "CAIRN_DB")]
        db: PathBuf,
        #[arg(long)]
        site: String,
        path: PathBuf,
    },
    /// Generate a demo site of a chosen size (for benchmarks).
    DemoData {
        #[arg(long, env = "CAIRN_DB")]
        db: PathBuf,
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
    /// Build a day's count list and print it (text, CSV or JSON).
    Plan {
        #[arg(long, env = "CAIRN_DB")]
        db: PathBuf,
        #[arg(long)]
        site: String,
        /// The day, YYYY-MM-DD (default: today, UTC).
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
    /// Manage sites.
    Site {
        #[command(subcommand)]
        command: SiteCommand,
    },
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
    db: Option<PathBuf>,
    #[arg(long, env = "CAIRN_LISTEN")]
    listen: Option<SocketAddr>,
    /// A TOML file of settings; flags and CAIRN_* variables override it.
    #[arg(long, env = "CAIRN_CONFIG")]
    config: Option<PathBuf>,
    /// SQLite durability at commit.
    #[arg(long, env = "CAIRN_SYNCHRONOUS")]
    synchronous: Option<Synchronous>,
}

#[derive(Subcommand)]
enum SiteCommand {
    /// Create a site.
    Add {
        #[arg(long, env = "CAIRN_DB")]
        db: PathBuf,
        #[arg(long)]
        code: String,
        #[arg(long)]
        name: String,
        #[arg(long, default_value = "UTC")]
        time_zone: String,
    },
}

/// Runs the command line and returns the process exit code.
pub fn main() -> ExitCode {
    let cli = Cli::parse();
    tracing_subscriber::fmt()
        .with_env_filter(
            tracing_subscriber::EnvFilter::try_from_default_env()
                .unwrap_or_else(|_| "info,tower_http=warn".into()),
        )
        .with_writer(std::io::stderr)
        .init();
    let rt = match tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()
    {
        Ok(rt) => rt,
        Err(e) => {
            eprintln!("cairn: cannot start the async runtime: {e}");
            return ExitCode::FAILURE;
        }
    };
    match rt.block_on(dispatch(cli.command)) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("cairn: {e:#}");
            ExitCode::FAILURE
        }
    }
}

fn open(db: PathBuf) -> anyhow::Result<AppState> {
    AppState::open(Config {
        db,
        ..Config::default()
    })
}

async fn site_of(store: &dyn Store, code: &str) -> anyhow::Result<crate::master::Site> {
    let code = SiteCode::parse(code)?;
    store.site(&code).await?.ok_or_else(|| {
        anyhow::anyhow!("no site '{code}' in this database (create it with `cairn site add`)")
    })
}

async fn dispatch(command: Command) -> anyhow::Result<()> {
    match command {
        Command::Demo { db, listen, seed } => {
            let fresh = !db.exists();
            let state = AppState::open(Config {
                db: db.clone(),
                listen,
                ..Config::default()
            })?;
            if fresh || state.store.sites().await?.is_empty() {
                eprintln!(
                    "Creating the demo site in {} (seed {seed}) ...",
                    db.display()
                );
                let summary =
                    demo::generate(state.store.as_ref(), &DemoSpec::standard(seed), true).await?;
                eprintln!("{summary}");
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
            if !config.db.exists() {
                anyhow::bail!(
                    "database {} does not exist (create one with `cairn demo` or `cairn site add`)",
                    config.db.display()
                );
            }
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
            match import_csv(state.store.as_ref(), &site, kind, &path, true).await {
                Ok(s) => {
                    println!(
                        "{}: {} rows read, {} written, {} already recorded",
                        path.display(),
                        s.rows,
                        s.written,
                        s.already_recorded
                    );
                    Ok(())
                }
                Err(ImportError::Lines(lines)) => {
                    for l in lines.iter().take(MAX_ERRORS_SHOWN) {
                        eprintln!("{}: {l}", path.display());
                    }
                    if lines.len() > MAX_ERRORS_SHOWN {
                        eprintln!("... and {} more", lines.len() - MAX_ERRORS_SHOWN);
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
            println!("{summary}");
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
            if !db.exists() {
                anyhow::bail!("database {} does not exist", db.display());
            }
            let state = open(db)?;
            let store = state.store.as_ref();
            let site = site_of(store, &site).await?;
            let day = date.unwrap_or_else(|| chrono::Utc::now().date_naive());
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
                PlanFormat::Text => print!("{}", planning::service::to_text(&view)),
                PlanFormat::Csv => print!("{}", planning::service::to_csv(&view)?),
                PlanFormat::Json => println!("{}", serde_json::to_string_pretty(&view)?),
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
                    name,
                    time_zone,
                })
                .await?;
            println!("site {} created", site.code);
            Ok(())
        }
    }
}

async fn serve(state: AppState, listen: SocketAddr, demo: bool) -> anyhow::Result<()> {
    let listener = tokio::net::TcpListener::bind(listen)
        .await
        .map_err(|e| anyhow::anyhow!("cannot listen on {listen}: {e}"))?;
    let addr = listener.local_addr()?;
    println!(
        "Cairn is serving {} at http://{addr}/",
        state.config.db.display()
    );
    if demo {
        println!("{}", demo::LOGIN_NOTE);
    }
    tokio::spawn(planning::service::nightly_classification(
        state.store.clone(),
    ));
    crate::run(state, listener, async {
        let _ = tokio::signal::ctrl_c().await;
    })
    .await?;
    Ok(())
}
