//! `cargo xtask wasm`: builds the two WebAssembly modules of the phone app and their JS glue
//! into `client/web/pkg/`, which the server compiles in. `cargo xtask dist`: the release
//! folder (see [`dist`]). `cargo xtask test`: every test. `cargo xtask demo`: the demo.
//!
//! - `cairn_scan.js` + `cairn_scan_bg.wasm`: the scan parser, loaded with the app shell;
//! - `cairn_camera.js` + `cairn_camera_bg.wasm`: the camera decoder, loaded when the camera
//!   opens.
//!
//! Runs `rustup target add wasm32-unknown-unknown` first (a fresh machine lacks it), builds
//! in a separate target directory (`target/wasm-build`, or `$CAIRN_WASM_TARGET_DIR`) so the
//! nested cargo never waits on the outer one's lock, and runs `wasm-opt -Oz` when a
//! `wasm-opt` is on PATH or in `client/web/node_modules/.bin` (npm `binaryen`); without it
//! the step is skipped with a message.

use std::path::{Path, PathBuf};
use std::process::Command;

mod contract;

use anyhow::{Context, Result, bail};
use sha2::{Digest, Sha256};

const TARGET: &str = "wasm32-unknown-unknown";
const PROFILE: &str = "wasm";
const CRATE: &str = "cairn-scan-wasm";
const ARTIFACT: &str = "cairn_scan_wasm.wasm";

/// One module to build: its output name and the cargo feature arguments.
struct Module {
    name: &'static str,
    features: &'static [&'static str],
}

const MODULES: &[Module] = &[
    Module {
        name: "cairn_scan",
        features: &[],
    },
    Module {
        name: "cairn_camera",
        features: &["--no-default-features", "--features", "camera"],
    },
];

fn main() -> Result<()> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    match args.first().map(String::as_str) {
        Some("wasm") => wasm(args.iter().any(|a| a == "--no-opt")),
        Some("test") => test(),
        Some("contract") => {
            let root = root();
            let cargo = std::env::var("CARGO").unwrap_or_else(|_| "cargo".to_owned());
            contract::run(&root, &build_cairn(&cargo, &root)?)
        }
        Some("dist") => dist(),
        Some("demo") => {
            wasm(false)?;
            demo(&args[1..])
        }
        _ => {
            eprintln!(
                "usage: cargo xtask wasm [--no-opt] | cargo xtask demo [cairn demo options] | cargo xtask test | cargo xtask contract | cargo xtask dist"
            );
            std::process::exit(2);
        }
    }
}

/// Builds the `cairn` binary (debug) the contract run serves; returns its path.
fn build_cairn(cargo: &str, root: &Path) -> Result<PathBuf> {
    run(Command::new(cargo).current_dir(root).args([
        "build",
        "-p",
        "cairn-server",
        "--bin",
        "cairn",
    ]))?;
    Ok(root.join("target/debug/cairn"))
}

/// Runs every test: builds the wasm (the binary compiles the app in), then the Rust
/// suites, the API contract run (Schemathesis, `contract.rs`), then the browser suites.
fn test() -> Result<()> {
    let root = root();
    let cargo = std::env::var("CARGO").unwrap_or_else(|_| "cargo".to_owned());
    wasm(true)?;
    run(Command::new(&cargo)
        .current_dir(&root)
        .args(["test", "--workspace", "--all-features"])
        .env_remove("CAIRN_TEST_STORE"))
    .context("the Rust test suites")?;
    let pg = postgres_url();
    if let Some(url) = &pg {
        postgres_suites(&cargo, &root, url)?;
    }
    contract::run(&root, &build_cairn(&cargo, &root)?).context("the API contract run")?;
    let browser = root.join("tests/browser");
    if !browser.join("node_modules/playwright-core").exists() {
        run(Command::new("npm")
            .current_dir(&browser)
            .args(["ci", "--no-audit", "--no-fund"]))
        .context("installing the browser tests' npm packages")?;
    }
    if !Path::new("/usr/bin/chromium").exists() {
        bail!("the browser tests need Debian's chromium: apt-get install -y chromium");
    }
    // The browser suites on SQLite files, then on the PostgreSQL server when there is one.
    let node = |store: Option<&str>| {
        let mut cmd = Command::new("node");
        cmd.current_dir(&browser)
            .args(["--test", "--test-concurrency=1"])
            .env("CAIRN_BIN", root.join("target/debug/cairn"));
        match store {
            Some(url) => cmd.env("CAIRN_TEST_STORE", url),
            None => cmd.env_remove("CAIRN_TEST_STORE"),
        };
        cmd
    };
    run(&mut node(None)).context("the browser test suites")?;
    if let Some(url) = &pg {
        println!("== the browser suites on PostgreSQL (each server a database of its own)");
        run(&mut node(Some(url))).context("the browser test suites on PostgreSQL")?;
    }
    Ok(())
}

/// The suites that do not run on PostgreSQL: the install test (about the binary, not the
/// store).
const NOT_ON_POSTGRES: &[&str] = &["install"];

/// Every test suite of the server, from its manifest.
fn server_suites(root: &Path) -> Result<Vec<String>> {
    let manifest = std::fs::read_to_string(root.join("server/Cargo.toml"))?;
    let mut names = Vec::new();
    let mut in_test = false;
    for line in manifest.lines().map(str::trim) {
        if line.starts_with('[') {
            in_test = line == "[[test]]";
        } else if in_test && let Some(v) = line.strip_prefix("name = ") {
            names.push(v.trim_matches('"').to_owned());
        }
    }
    Ok(names)
}

/// The PostgreSQL server the second runs use: the one `CAIRN_TEST_STORE` names, else
/// 127.0.0.1:5432 when one answers there. Says plainly when there is none, so the runs
/// on it are skipped.
fn postgres_url() -> Option<String> {
    match std::env::var("CAIRN_TEST_STORE") {
        Ok(url) if !url.trim().is_empty() => Some(url),
        _ => {
            let addr = std::net::SocketAddr::from(([127, 0, 0, 1], 5432));
            if std::net::TcpStream::connect_timeout(&addr, std::time::Duration::from_secs(2))
                .is_err()
            {
                println!(
                    "SKIPPED the PostgreSQL runs (Rust and browser suites): nothing answers \
                     on 127.0.0.1:5432 (set CAIRN_TEST_STORE=postgres://… to name a server)"
                );
                return None;
            }
            Some("postgres://postgres@127.0.0.1:5432/postgres".to_owned())
        }
    }
}

/// Runs the server's unit tests and every suite but [`NOT_ON_POSTGRES`] again on the
/// PostgreSQL server at `url`, each test in a database of its own.
fn postgres_suites(cargo: &str, root: &Path, url: &str) -> Result<()> {
    let suites: Vec<String> = server_suites(root)?
        .into_iter()
        .filter(|s| !NOT_ON_POSTGRES.contains(&s.as_str()))
        .collect();
    println!("== the same suites on PostgreSQL (each test a database of its own)");
    // The same flags as the first run, so its build serves this one.
    let mut args = vec!["test", "--workspace", "--all-features", "--lib"];
    for suite in &suites {
        args.extend(["--test", suite.as_str()]);
    }
    run(Command::new(cargo)
        .current_dir(root)
        .args(&args)
        .env("CAIRN_TEST_STORE", url))
    .context("the suites on PostgreSQL")
}

/// Builds a release into `target/dist/cairn-VERSION/`: the binary (the phone app inside),
/// the example config, shell completions and the manual page made by that binary, and
/// `SHA256SUMS` (`sha256sum -c SHA256SUMS` checks it). Then runs `tests/install.rs`
/// against the release binary, which serves the app with the source folder hidden.
fn dist() -> Result<()> {
    let root = root();
    let cargo = std::env::var("CARGO").unwrap_or_else(|_| "cargo".to_owned());
    wasm(false)?;
    run(Command::new(&cargo).current_dir(&root).args([
        "build",
        "--release",
        "--locked",
        "-p",
        "cairn-server",
        "--bin",
        "cairn",
    ]))?;
    let bin = root.join("target/release/cairn");
    let version = output(Command::new(&bin).arg("--version"))?;
    let folder = root
        .join("target/dist")
        .join(format!("cairn-{}", env!("CARGO_PKG_VERSION")));
    if folder.exists() {
        std::fs::remove_dir_all(&folder)
            .with_context(|| format!("clearing {}", folder.display()))?;
    }
    std::fs::create_dir_all(folder.join("completions"))?;
    std::fs::create_dir_all(folder.join("man"))?;
    std::fs::copy(&bin, folder.join("cairn"))?;
    std::fs::copy(
        root.join("deploy/systemd/cairn.toml"),
        folder.join("cairn.toml"),
    )?;
    for (shell, name) in [
        ("bash", "completions/cairn.bash"),
        ("zsh", "completions/_cairn"),
        ("fish", "completions/cairn.fish"),
    ] {
        let script = output(Command::new(&bin).args(["completions", shell]))?;
        std::fs::write(folder.join(name), script)?;
    }
    std::fs::write(
        folder.join("man/cairn.1"),
        output(Command::new(&bin).arg("man"))?,
    )?;
    let files = [
        "cairn",
        "cairn.toml",
        "completions/cairn.bash",
        "completions/_cairn",
        "completions/cairn.fish",
        "man/cairn.1",
    ];
    let mut sums = String::new();
    for name in files {
        let bytes = std::fs::read(folder.join(name))?;
        let digest = Sha256::digest(&bytes);
        let hex: String = digest.iter().map(|b| format!("{b:02x}")).collect();
        // GNU coreutils' format: hash, two spaces (text mode), name.
        sums.push_str(&format!("{hex}  {name}\n"));
    }
    std::fs::write(folder.join("SHA256SUMS"), sums)?;
    run(Command::new(&cargo)
        .current_dir(&root)
        .args(["test", "-p", "cairn-server", "--test", "install"])
        .env("CAIRN_TEST_BIN", &bin))
    .context("the install tests against the release binary")?;
    println!("{}\n{}", version.trim(), folder.display());
    Ok(())
}

fn output(cmd: &mut Command) -> Result<String> {
    let out = cmd.output().with_context(|| format!("starting {cmd:?}"))?;
    if !out.status.success() {
        bail!(
            "{cmd:?} failed with {}: {}",
            out.status,
            String::from_utf8_lossy(&out.stderr)
        );
    }
    String::from_utf8(out.stdout).with_context(|| format!("{cmd:?} printed non-UTF-8"))
}

/// Builds and starts `cairn demo` in release mode, passing `args` on.
fn demo(args: &[String]) -> Result<()> {
    let cargo = std::env::var("CARGO").unwrap_or_else(|_| "cargo".to_owned());
    run(Command::new(cargo)
        .current_dir(root())
        .args([
            "run",
            "--release",
            "-p",
            "cairn-server",
            "--bin",
            "cairn",
            "--",
            "demo",
        ])
        .args(args))
}

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .parent()
        .expect("xtask sits in the workspace root")
        .to_path_buf()
}

fn wasm(no_opt: bool) -> Result<()> {
    let root = root();
    let out_dir = root.join("client/web/pkg");
    let target_dir = std::env::var_os("CAIRN_WASM_TARGET_DIR")
        .map(PathBuf::from)
        .unwrap_or_else(|| root.join("target/wasm-build"));
    run(Command::new("rustup").args(["target", "add", TARGET]))
        .context("installing the wasm32 target with rustup")?;
    std::fs::create_dir_all(&out_dir)?;
    let wasm_opt = if no_opt { None } else { find_wasm_opt(&root) };
    if wasm_opt.is_none() && !no_opt {
        eprintln!(
            "xtask: wasm-opt not found (npm install binaryen in client/web to get it); skipping size optimisation"
        );
    }
    for module in MODULES {
        let cargo = std::env::var("CARGO").unwrap_or_else(|_| "cargo".to_owned());
        run(Command::new(cargo)
            .current_dir(&root)
            .args([
                "build",
                "-p",
                CRATE,
                "--target",
                TARGET,
                "--profile",
                PROFILE,
            ])
            .args(module.features)
            .arg("--target-dir")
            .arg(&target_dir))
        .with_context(|| format!("building {}", module.name))?;
        let input = target_dir.join(TARGET).join(PROFILE).join(ARTIFACT);
        wasm_bindgen_cli_support::Bindgen::new()
            .input_path(&input)
            .out_name(module.name)
            .web(true)?
            .omit_default_module_path(false)
            .typescript(false)
            .generate(&out_dir)
            .with_context(|| format!("generating JS glue for {}", module.name))?;
        let wasm = out_dir.join(format!("{}_bg.wasm", module.name));
        let before = size(&wasm)?;
        match &wasm_opt {
            Some(tool) => {
                run(Command::new(tool)
                    .arg("-Oz")
                    .arg("--enable-bulk-memory")
                    .arg("--enable-nontrapping-float-to-int")
                    .arg("--enable-sign-ext")
                    .arg("--enable-mutable-globals")
                    .arg(&wasm)
                    .arg("-o")
                    .arg(&wasm))
                .context("running wasm-opt")?;
                println!(
                    "{}: {} bytes ({} before wasm-opt)",
                    wasm.display(),
                    size(&wasm)?,
                    before
                );
            }
            None => println!("{}: {before} bytes", wasm.display()),
        }
    }
    Ok(())
}

fn find_wasm_opt(root: &Path) -> Option<PathBuf> {
    let local = root.join("client/web/node_modules/.bin/wasm-opt");
    if local.exists() {
        return Some(local);
    }
    let found = Command::new("wasm-opt").arg("--version").output();
    found
        .is_ok_and(|o| o.status.success())
        .then(|| PathBuf::from("wasm-opt"))
}

fn size(path: &Path) -> Result<u64> {
    Ok(std::fs::metadata(path)
        .with_context(|| format!("reading {}", path.display()))?
        .len())
}

fn run(cmd: &mut Command) -> Result<()> {
    let status = cmd.status().with_context(|| format!("starting {cmd:?}"))?;
    if !status.success() {
        bail!("{cmd:?} failed with {status}");
    }
    Ok(())
}
