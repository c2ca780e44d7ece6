//! `cargo xtask test`'s API contract run: Schemathesis (PyPI, the version `.ci/run`
//! pins) against the OpenAPI document a running `cairn serve` serves, with a seeded
//! site (`tests/contract/*.csv`: Kestrel Lane North) and an integration token of an
//! admin who is also inventory manager and planner there.
//!
//! Every operation is generated for, with data that fits its schemas and data that does
//! not (the examples, coverage, fuzzing and stateful phases), deterministically. The path's
//! `site`, `bin` and `sku` are the seeded ones (`tests/contract/schemathesis.toml`), so
//! requests reach each route's own checks rather than "unknown site"; unknown and malformed
//! sites are the access tests' part (`tests/access.rs`). The token is an admin's, so the
//! phone's routes (device token, counter role) are exercised for their refusals only. Every check runs but the
//! one named in [`EXCLUDED`], whose reason is [`LEFT_OUT`]. Skipped with a plain
//! message when `schemathesis` is not installed.

use anyhow::{Context, Result, bail};
use std::io::{BufRead, Write};
use std::path::Path;
use std::process::{Command, Stdio};

/// The Schemathesis release `.ci/run` installs.
pub const SCHEMATHESIS_VERSION: &str = "4.32.5";

/// Every check Schemathesis has, but those in [`LEFT_OUT`].
const EXCLUDED: &str = "positive_data_acceptance";

/// The checks left out, and why.
const LEFT_OUT: &str = "positive_data_acceptance: a request that fits the schemas may still \
be refused by a rule JSON Schema cannot state (a run holder must be a counter at the site, a \
report covers at most 3,660 days, a cursor must be one this list gave, a movement's bin and \
SKU must exist); those answers are documented 4xx with the error shape, which the other \
checks hold them to";

/// Examples per operation and phase (Schemathesis' `--max-examples`).
const MAX_EXAMPLES: &str = "30";

/// Runs the contract check; `bin` is the debug `cairn` binary.
pub fn run(root: &Path, bin: &Path) -> Result<()> {
    let found = Command::new("schemathesis").arg("--version").output();
    match found {
        Ok(out) if out.status.success() => {}
        _ => {
            println!(
                "SKIPPED the API contract run: schemathesis is not installed \
                 (python3 -m pip install schemathesis=={SCHEMATHESIS_VERSION})"
            );
            return Ok(());
        }
    }
    let dir = root.join("target/contract");
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir)?;
    let db = dir.join("kestrel.db");
    let db_arg = db.to_str().context("the target folder's path is UTF-8")?;
    let seeds = root.join("tests/contract");

    quiet(Command::new(bin).args([
        "site",
        "add",
        "--db",
        db_arg,
        "--code",
        "KLN",
        "--name",
        "Kestrel Lane North",
    ]))?;
    let mut add = Command::new(bin)
        .args([
            "user",
            "add",
            "--db",
            db_arg,
            "--site",
            "KLN",
            "--name",
            "ines",
            "--roles",
            "admin,inventory_manager,planner",
            "--password-stdin",
        ])
        .stdin(Stdio::piped())
        .stdout(Stdio::null())
        .spawn()?;
    add.stdin
        .take()
        .context("stdin was piped")?
        .write_all(b"kestrel-lane-contract-run\n")?;
    if !add.wait()?.success() {
        bail!("cairn user add failed");
    }
    for kind in ["bins", "items", "packs", "movements"] {
        let file = seeds.join(format!("{kind}.csv"));
        quiet(
            Command::new(bin)
                .args(["import", "--db", db_arg, "--site", "KLN", kind])
                .arg(&file),
        )?;
    }
    let issued = Command::new(bin)
        .args([
            "user", "token", "--db", db_arg, "--site", "KLN", "--name", "ines", "--role", "admin",
        ])
        .output()?;
    let text = String::from_utf8_lossy(&issued.stdout);
    let token = text
        .split_whitespace()
        .find(|w| w.starts_with("cairn_api_"))
        .context("cairn user token printed no token")?
        .to_string();

    let mut server = Command::new(bin)
        .args(["serve", "--db", db_arg, "--listen", "127.0.0.1:0"])
        .env("RUST_LOG", "error")
        .stdout(Stdio::piped())
        .spawn()
        .context("starting cairn serve")?;
    let mut banner = String::new();
    std::io::BufReader::new(server.stdout.take().context("stdout was piped")?)
        .read_line(&mut banner)?;
    let outcome = (|| {
        let url = banner
            .split(" at ")
            .nth(1)
            .context("cairn serve names its address on its first line")?
            .trim()
            .trim_end_matches('/')
            .to_string();
        println!("== the API contract (schemathesis {SCHEMATHESIS_VERSION}) against {url}");
        println!("   left out: {LEFT_OUT}");
        let status = Command::new("schemathesis")
            .arg("--config-file")
            .arg(seeds.join("schemathesis.toml"))
            .args(["run", &format!("{url}/api/v1/openapi.json")])
            .args(["--checks", "all", "--exclude-checks", EXCLUDED])
            .args(["--max-examples", MAX_EXAMPLES])
            .args(["--header", &format!("Authorization: Bearer {token}")])
            .args(["--generation-deterministic", "--workers", "2"])
            .arg("--report-junit-path")
            .arg(dir.join("junit.xml"))
            .env("NO_COLOR", "1")
            // Schemathesis keeps its example database in the folder it runs in.
            .current_dir(&dir)
            .status()
            .context("starting schemathesis")?;
        if !status.success() {
            bail!("schemathesis found failures (report: target/contract/junit.xml)");
        }
        Ok(())
    })();
    let _ = server.kill();
    let _ = server.wait();
    outcome
}

/// Runs a command, showing its output only when it fails.
fn quiet(cmd: &mut Command) -> Result<()> {
    let out = cmd.output().with_context(|| format!("starting {cmd:?}"))?;
    if !out.status.success() {
        bail!(
            "{cmd:?} failed: {}{}",
            String::from_utf8_lossy(&out.stdout),
            String::from_utf8_lossy(&out.stderr)
        );
    }
    Ok(())
}
