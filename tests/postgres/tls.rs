//! TLS to the database as the URL's `sslmode` says, against the test server itself: it
//! must have `ssl = on` (Debian's default, with its self-signed certificate); when it
//! has not, each test says plainly that it skipped. The server's settings are only read.

use crate::common::{self, PgTestDb};

/// An authority that signed nothing this server holds (made for these tests; only its
/// certificate is kept): trusting it alone, no server certificate verifies.
const UNRELATED_AUTHORITY: &str = "-----BEGIN CERTIFICATE-----
MIIBvTCCAWOgAwIBAgIUQSgZWakdPoLUghXMRUfY5VV51XkwCgYIKoZIzj0EAwIw
MzExMC8GA1UEAwwoQ2Fpcm4gdGVzdCBhdXRob3JpdHkgdGhhdCBzaWduZWQgbm90
aGluZzAgFw0yNjEyMDQxNDIwMzBaGA8yMTI2MTExMDE0MjAzMFowMzExMC8GA1UE
AwwoQ2Fpcm4gdGVzdCBhdXRob3JpdHkgdGhhdCBzaWduZWQgbm90aGluZzBZMBMG
ByqGSM49AgEGCCqGSM49AwEHA0IABOQmBieYyK2ua75ojHvmFmufASoX8dFudgHo
FQLMDd2j3VPTxg5Gjq8/Bqe7eN0r+fDIxmaCUEK3IR6flC5x0gajUzBRMB0GA1Ud
DgQWBBSu+b1EC2OntENsbuAiw/tbwIrlJDAfBgNVHSMEGDAWgBSu+b1EC2OntENs
buAiw/tbwIrlJDAPBgNVHRMBAf8EBTADAQH/MAoGCCqGSM49BAMCA0gAMEUCIChJ
6kRghcJNBLvnG5PKDIjVkxR2qmKN4qYH4jsrfVFlAiEAmMqzB+/bZjkiFGQg/d6m
OsyEyF6y3lAtIS09aEwWf5U=
-----END CERTIFICATE-----
";

/// `url` with `params` added to its parameters (the test URL may carry some already).
fn with(url: &str, params: &str) -> String {
    let base: String = url
        .split('?')
        .next()
        .expect("split gives one part at least")
        .into();
    let kept: Vec<&str> = url
        .split_once('?')
        .map(|(_, q)| q.split('&').filter(|p| !p.starts_with("ssl")).collect())
        .unwrap_or_default();
    let mut all = kept;
    all.push(params);
    format!("{base}?{}", all.join("&"))
}

/// Opens the store at `url` as the server does (migration, then the pool) and answers
/// whether the pooled connection is encrypted, or the store's error.
async fn encrypted(url: &str) -> Result<bool, String> {
    let store = cairn::store::postgres::PgStore::open(url, Default::default())
        .map_err(|e| format!("{e:#}"))?;
    let c = store.client().await.map_err(|e| format!("{e:#}"))?;
    let row = c
        .query_one(
            "select ssl from pg_stat_ssl where pid = pg_backend_pid()",
            &[],
        )
        .await
        .map_err(|e| e.to_string())?;
    Ok(row.get(0))
}

/// A setting of the test server (read over a plain connection).
async fn setting(url: &str, name: &str) -> String {
    let (config, tls) = cairn::store::postgres::connect::read_url(&with(url, "sslmode=disable"))
        .expect("the test URL reads");
    let (client, conn) = config.connect(tls).await.expect("the test server answers");
    tokio::spawn(conn);
    client
        .query_one(&format!("show {name}"), &[])
        .await
        .expect("a superuser reads the setting")
        .get(0)
}

/// The test's database, or `None` (said on stderr) when the suites run on SQLite or the
/// server has TLS off.
async fn tls_database(test: &str) -> Option<PgTestDb> {
    if super::skipped() {
        return None;
    }
    let db = PgTestDb::create().expect("the switch is set");
    if setting(&db.url, "ssl").await != "on" {
        eprintln!(
            "SKIPPED {test}: the PostgreSQL server of {} has ssl = off, so TLS to it cannot \
             be tested (its settings are left alone)",
            common::STORE_SWITCH
        );
        return None;
    }
    Some(db)
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn sslmode_require_encrypts_and_disable_does_not() {
    let Some(db) = tls_database("sslmode_require_encrypts_and_disable_does_not").await else {
        return;
    };
    for (mode, want) in [("require", true), ("prefer", true), ("disable", false)] {
        let got = encrypted(&with(&db.url, &format!("sslmode={mode}")))
            .await
            .unwrap_or_else(|e| panic!("sslmode={mode} connects: {e}"));
        assert_eq!(got, want, "sslmode={mode}: pg_stat_ssl.ssl");
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn verify_full_refuses_a_certificate_no_trusted_authority_signed() {
    let Some(db) =
        tls_database("verify_full_refuses_a_certificate_no_trusted_authority_signed").await
    else {
        return;
    };
    let dir = tempfile::tempdir().unwrap();
    let unrelated = dir.path().join("unrelated.pem");
    std::fs::write(&unrelated, UNRELATED_AUTHORITY).unwrap();
    // A password in the URL (the server trusts the test user anyway) must not be shown.
    let url = db.url.replace("://postgres@", "://postgres:not-shown-7@");
    for mode in ["verify-full", "verify-ca", "require"] {
        let e = encrypted(&with(
            &url,
            &format!("sslmode={mode}&sslrootcert={}", unrelated.display()),
        ))
        .await
        .expect_err("no trusted authority signed the server's certificate");
        assert!(
            e.contains("certificate could not be verified") && e.contains("no authority"),
            "sslmode={mode}: {e}"
        );
        assert!(!e.contains("not-shown-7"), "the password is shown: {e}");
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn verify_full_connects_when_sslrootcert_names_the_servers_own_certificate() {
    let test = "verify_full_connects_when_sslrootcert_names_the_servers_own_certificate";
    let Some(db) = tls_database(test).await else {
        return;
    };
    let cert = setting(&db.url, "ssl_cert_file").await;
    if let Err(e) = std::fs::read(&cert) {
        eprintln!("SKIPPED {test}: the server's certificate {cert} cannot be read here: {e}");
        return;
    }
    let root = format!("sslrootcert={cert}");
    // verify-ca checks the chain only, so any host name of the server does.
    let got = encrypted(&with(&db.url, &format!("sslmode=verify-ca&{root}")))
        .await
        .unwrap_or_else(|e| panic!("verify-ca with the server's own certificate: {e}"));
    assert!(got);
    // verify-full also needs the certificate to name the host: Debian's names localhost.
    let by_name = with(&db.url, &format!("sslmode=verify-full&{root}"))
        .replace("@127.0.0.1:", "@localhost:")
        .replace("@127.0.0.1/", "@localhost/");
    match encrypted(&by_name).await {
        Ok(got) => assert!(got),
        Err(e) if e.contains("does not name the host") => {
            eprintln!(
                "SKIPPED the verify-full part of {test}: the certificate does not name localhost: {e}"
            );
        }
        Err(e) => panic!("verify-full with the server's own certificate: {e}"),
    }
}
