//! Secrets: passwords and PINs (argon2id), random tokens (stored as SHA-256
//! digests), and the comparisons between them. Nothing here prints a secret:
//! every wrapper's `Debug` is redacted.

use argon2::password_hash::{Output, ParamsString, PasswordHash, SaltString};
use argon2::{Algorithm, Argon2, Block, Params, Version};
use base64::Engine as _;
use base64::engine::general_purpose::URL_SAFE_NO_PAD;
use rand::TryRngCore as _;
use rand::rngs::OsRng;
use sha2::{Digest, Sha256};
use std::fmt;
use std::sync::OnceLock;
use subtle::ConstantTimeEq as _;

// argon2id at m = 19 MiB, t = 2, p = 1: one of the configurations listed in
// the OWASP Password Storage Cheat Sheet ("Argon2id ... minimum configuration
// of 19 MiB of memory, an iteration count of 2, and 1 degree of parallelism";
// quoted from memory). Parameters are stored in each PHC string, so raising
// them later keeps old hashes verifiable.
/// Memory cost of a password or PIN hash, in KiB.
pub const HASH_MEMORY_KIB: u32 = 19 * 1024;
/// Iterations of a password or PIN hash.
pub const HASH_ITERATIONS: u32 = 2;
/// Lanes of a password or PIN hash.
pub const HASH_LANES: u32 = 1;

/// Shortest password accepted, in characters.
pub const MIN_PASSWORD_CHARS: usize = 12;
/// Longest password accepted, in characters (bounds the hashing work per request).
pub const MAX_PASSWORD_CHARS: usize = 128;
/// Shortest counter PIN, in digits.
pub const MIN_PIN_DIGITS: usize = 4;
/// Longest counter PIN, in digits.
pub const MAX_PIN_DIGITS: usize = 12;
/// Random bytes in a device token, an integration token or a session id.
pub const TOKEN_BYTES: usize = 32;

/// A password or PIN as typed. Its `Debug` never shows it.
#[derive(Clone, PartialEq, Eq, serde::Deserialize)]
#[serde(transparent)]
pub struct Secret(String);

impl Secret {
    /// Wraps a typed secret.
    pub fn new(text: impl Into<String>) -> Self {
        Self(text.into())
    }

    /// Exposes the secret to the hasher; the name makes every use visible.
    pub fn expose(&self) -> &str {
        &self.0
    }

    /// Checks the password rules: length only, as long passphrases beat
    /// composition rules.
    pub fn check_password(&self) -> Result<(), String> {
        let n = self.0.chars().count();
        if n < MIN_PASSWORD_CHARS {
            return Err(format!(
                "a password has at least {MIN_PASSWORD_CHARS} characters"
            ));
        }
        if n > MAX_PASSWORD_CHARS {
            return Err(format!(
                "a password has at most {MAX_PASSWORD_CHARS} characters"
            ));
        }
        Ok(())
    }

    /// Checks the PIN rules: digits only, of a bounded length.
    pub fn check_pin(&self) -> Result<(), String> {
        let n = self.0.len();
        if !self.0.bytes().all(|b| b.is_ascii_digit())
            || !(MIN_PIN_DIGITS..=MAX_PIN_DIGITS).contains(&n)
        {
            return Err(format!(
                "a PIN is {MIN_PIN_DIGITS} to {MAX_PIN_DIGITS} digits"
            ));
        }
        Ok(())
    }
}

impl fmt::Debug for Secret {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("Secret(redacted)")
    }
}

/// An argon2id PHC string of a password or PIN. Its `Debug` is redacted too:
/// a hash is not a secret, but it is an offline-guessing target.
#[derive(Clone, PartialEq, Eq)]
pub struct SecretHash(pub String);

impl fmt::Debug for SecretHash {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("SecretHash(redacted)")
    }
}

fn params() -> Params {
    Params::new(HASH_MEMORY_KIB, HASH_ITERATIONS, HASH_LANES, None)
        .expect("the argon2 parameters are valid constants")
}

fn hasher() -> Argon2<'static> {
    Argon2::new(Algorithm::Argon2id, Version::V0x13, params())
}

/// Working memory for one argon2id hash ([`HASH_MEMORY_KIB`]), reused from
/// hash to hash. Letting each hash allocate its own left the allocator
/// holding every block it had ever handed out (RSS grew by 19 MiB per
/// sign-in); reusing a few blocks keeps memory at one block per hash running.
pub struct HashMemory(Vec<Block>);

impl HashMemory {
    /// Allocates the memory of one hash.
    pub fn new() -> Self {
        Self(vec![Block::new(); HASH_MEMORY_KIB as usize])
    }
}

impl Default for HashMemory {
    fn default() -> Self {
        Self::new()
    }
}

impl fmt::Debug for HashMemory {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "HashMemory({} KiB)", self.0.len())
    }
}

/// Hashes a secret with a fresh salt in `memory`. Slow by design: call it on a
/// blocking thread.
pub fn hash_with(memory: &mut HashMemory, secret: &Secret) -> SecretHash {
    let mut salt = [0u8; 16];
    OsRng
        .try_fill_bytes(&mut salt)
        .expect("the operating system's random source is available");
    let mut out = [0u8; Params::DEFAULT_OUTPUT_LEN];
    hasher()
        .hash_password_into_with_memory(secret.expose().as_bytes(), &salt, &mut out, &mut memory.0)
        .expect("argon2 hashing with valid parameters and a full-size memory cannot fail");
    let salt = SaltString::encode_b64(&salt).expect("16 bytes is a valid salt length");
    let phc = PasswordHash {
        algorithm: Algorithm::Argon2id.ident(),
        version: Some(Version::V0x13.into()),
        params: ParamsString::try_from(&params()).expect("the constant parameters encode"),
        salt: Some(salt.as_salt()),
        hash: Some(Output::new(&out).expect("32 bytes is a valid output length")),
    };
    SecretHash(phc.to_string())
}

/// Checks a secret against a stored hash, using `memory` (a hash stored with
/// larger parameters than today's gets memory of its own). Slow by design:
/// call it on a blocking thread.
pub fn verify_with(memory: &mut HashMemory, secret: &Secret, stored: &SecretHash) -> bool {
    let Ok(parsed) = PasswordHash::new(&stored.0) else {
        tracing::error!("a stored secret hash does not parse; the account cannot sign in");
        return false;
    };
    let (Some(salt), Some(expected)) = (parsed.salt, parsed.hash) else {
        return false;
    };
    let (Ok(algorithm), Ok(version), Ok(params)) = (
        Algorithm::try_from(parsed.algorithm),
        parsed
            .version
            .map_or(Ok(Version::default()), Version::try_from),
        Params::try_from(&parsed),
    ) else {
        tracing::error!("a stored secret hash names parameters this build cannot check");
        return false;
    };
    let argon = Argon2::new(algorithm, version, params);
    let mut salt_bytes = [0u8; 64];
    let Ok(salt) = salt.decode_b64(&mut salt_bytes) else {
        return false;
    };
    let password = secret.expose().as_bytes();
    let mut out = vec![0u8; expected.len()];
    let done = match argon.hash_password_into_with_memory(password, salt, &mut out, &mut memory.0) {
        Err(argon2::Error::MemoryTooLittle) => argon.hash_password_into(password, salt, &mut out),
        other => other,
    };
    // `Output` compares in constant time.
    done.is_ok() && Output::new(&out).is_ok_and(|o| o == expected)
}

/// Hashes a secret with a fresh salt in memory of its own. Slow by design: call
/// it on a blocking thread.
pub fn hash_blocking(secret: &Secret) -> SecretHash {
    hash_with(&mut HashMemory::new(), secret)
}

/// Checks a secret against a stored hash in memory of its own. Slow by design:
/// call it on a blocking thread.
pub fn verify_blocking(secret: &Secret, stored: &SecretHash) -> bool {
    verify_with(&mut HashMemory::new(), secret, stored)
}

/// A hash of no one's secret, checked when the user name is unknown, so a
/// wrong name costs the same time as a wrong password.
fn decoy(memory: &mut HashMemory) -> &'static SecretHash {
    static DECOY: OnceLock<SecretHash> = OnceLock::new();
    DECOY.get_or_init(|| hash_with(memory, &Secret::new(random_text())))
}

/// Checks a secret against a stored hash in `memory`; with none it checks a
/// decoy and answers false, taking the same time. Slow by design: call it on
/// a blocking thread.
pub fn verify_or_decoy(
    memory: &mut HashMemory,
    secret: &Secret,
    stored: Option<&SecretHash>,
) -> bool {
    match stored {
        Some(h) => verify_with(memory, secret, h),
        None => {
            let decoy = decoy(memory);
            verify_with(memory, secret, decoy);
            false
        }
    }
}

/// Hashes a secret on a blocking thread, off the async runtime. Requests hash
/// through [`HashGate`](super::hashing::HashGate) instead, which caps how many run at once.
pub async fn hash(secret: Secret) -> anyhow::Result<SecretHash> {
    tokio::task::spawn_blocking(move || hash_blocking(&secret))
        .await
        .map_err(|e| anyhow::anyhow!("the hashing task failed: {e}"))
}

/// Returns `TOKEN_BYTES` random bytes from the operating system as base64url text.
pub fn random_text() -> String {
    let mut bytes = [0u8; TOKEN_BYTES];
    OsRng
        .try_fill_bytes(&mut bytes)
        .expect("the operating system's random source is available");
    URL_SAFE_NO_PAD.encode(bytes)
}

/// Returns the hex SHA-256 digest of a high-entropy token, the form stored.
/// A fast hash suffices: the token is 256 random bits, not a guessable word.
pub fn token_digest(token: &str) -> String {
    let digest = Sha256::digest(token.as_bytes());
    let mut hex = String::with_capacity(64);
    for b in digest {
        use std::fmt::Write as _;
        let _ = write!(hex, "{b:02x}");
    }
    hex
}

/// Compares two strings in time that depends only on their lengths.
pub fn same(a: &str, b: &str) -> bool {
    a.as_bytes().ct_eq(b.as_bytes()).into()
}

/// A bearer token handed out once (device or integration); only its digest is kept.
#[derive(Clone, PartialEq, Eq)]
pub struct Token(String);

/// Prefix of device tokens, so a leaked one is recognisable.
pub const DEVICE_TOKEN_PREFIX: &str = "cairn_dev_";
/// Prefix of integration tokens.
pub const API_TOKEN_PREFIX: &str = "cairn_api_";

impl Token {
    /// Makes a new random token with a prefix saying what it is for.
    pub fn generate(prefix: &str) -> Self {
        Self(format!("{prefix}{}", random_text()))
    }

    /// Exposes the token, to send it to its owner once.
    pub fn expose(&self) -> &str {
        &self.0
    }

    /// Returns the digest to store.
    pub fn digest(&self) -> String {
        token_digest(&self.0)
    }
}

impl fmt::Debug for Token {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("Token(redacted)")
    }
}

/// A session's form token (synchroniser token), echoed in every form it serves.
#[derive(Clone, PartialEq, Eq)]
pub struct CsrfToken(pub String);

impl CsrfToken {
    /// Makes a new random form token.
    pub fn generate() -> Self {
        Self(random_text())
    }

    /// Compares a submitted token with this one in constant time.
    pub fn matches(&self, submitted: &str) -> bool {
        same(&self.0, submitted)
    }
}

impl fmt::Debug for CsrfToken {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("CsrfToken(redacted)")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_hash_verifies_its_secret_only_and_names_argon2id_with_the_chosen_parameters() {
        let h = hash_blocking(&Secret::new("correct horse battery"));
        // PHC string format (password-hashing competition): $argon2id$v=19$m=..,t=..,p=..$salt$hash
        assert!(
            h.0.starts_with("$argon2id$v=19$m=19456,t=2,p=1$"),
            "{}",
            h.0
        );
        assert!(verify_blocking(&Secret::new("correct horse battery"), &h));
        assert!(!verify_blocking(&Secret::new("correct horse batterx"), &h));
    }

    #[test]
    fn hashes_made_in_reused_memory_agree_with_the_argon2_crates_own_phc_strings() {
        use argon2::password_hash::{PasswordHasher as _, PasswordVerifier as _};
        let mut memory = HashMemory::new();
        let secret = Secret::new("a passphrase of ours");
        // Ours, checked by the crate's own verifier (after the memory was used once).
        let _ = hash_with(&mut memory, &Secret::new("something else first"));
        let ours = hash_with(&mut memory, &secret);
        let parsed = PasswordHash::new(&ours.0).unwrap();
        assert!(
            hasher()
                .verify_password(b"a passphrase of ours", &parsed)
                .is_ok()
        );
        // The crate's, checked by ours, including one with smaller parameters
        // and one needing more memory than a `HashMemory` holds.
        for m_kib in [HASH_MEMORY_KIB, 8 * 1024, HASH_MEMORY_KIB + 1024] {
            let argon = Argon2::new(
                Algorithm::Argon2id,
                Version::V0x13,
                Params::new(m_kib, 1, 1, None).unwrap(),
            );
            let salt = SaltString::encode_b64(&[7u8; 16]).unwrap();
            let theirs = argon.hash_password(b"a passphrase of ours", &salt).unwrap();
            let theirs = SecretHash(theirs.to_string());
            assert!(verify_with(&mut memory, &secret, &theirs), "m = {m_kib}");
            assert!(!verify_with(
                &mut memory,
                &Secret::new("a passphrase of ourz"),
                &theirs
            ));
        }
    }

    #[test]
    fn debug_output_never_shows_a_secret() {
        let s = Secret::new("hunter2hunter2");
        let t = Token::generate(DEVICE_TOKEN_PREFIX);
        let text = format!("{s:?} {t:?} {:?}", CsrfToken::generate());
        assert!(!text.contains("hunter2"));
        assert!(!text.contains(t.expose()));
        assert!(text.contains("redacted"));
    }

    #[test]
    fn the_token_digest_is_sha256() {
        // SHA-256("abc"), FIPS 180-2 appendix B.1 test vector.
        assert_eq!(
            token_digest("abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
    }

    #[test]
    fn password_and_pin_rules_name_the_limit() {
        assert!(Secret::new("short").check_password().is_err());
        assert!(Secret::new("long enough pass").check_password().is_ok());
        assert!(Secret::new("12a4").check_pin().is_err());
        assert!(Secret::new("123").check_pin().is_err());
        assert!(Secret::new("2468").check_pin().is_ok());
    }
}
