//! Checking a user name and a password or PIN, with throttling. Used by the
//! sign-in page and by phone enrolment alike; it writes failures and their
//! audit rows, and leaves starting a session or enrolling to the caller.

use super::audit::{Action, Actor, AuditEvent};
use super::hashing::{HashError, HashGate};
use super::secret::Secret;
use super::throttle::{self, LOCKED_TEXT};
use super::{User, UserName};
use crate::error::ApiError;
use crate::store::Store;
use crate::time::Timestamp;
use serde_json::json;

/// Which secret a sign-in checks.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Proof {
    Password,
    Pin,
}

impl Proof {
    /// Returns what a sender is told on a wrong name or secret (never which of the two).
    pub fn wrong_text(self) -> &'static str {
        match self {
            Proof::Password => "The user name or password is wrong.",
            Proof::Pin => "The user name or PIN is wrong.",
        }
    }
}

/// Why a sign-in did not succeed.
#[derive(Debug, thiserror::Error)]
pub enum SignInError {
    #[error("{}", .0.wrong_text())]
    Wrong(Proof),
    #[error("{LOCKED_TEXT}")]
    Locked,
    /// Every turn to hash stayed taken: nothing was checked or counted.
    #[error(transparent)]
    Busy(HashError),
    #[error(transparent)]
    Internal(#[from] anyhow::Error),
}

impl From<crate::store::error::StoreError> for SignInError {
    fn from(e: crate::store::error::StoreError) -> Self {
        SignInError::Internal(e.into())
    }
}

impl From<SignInError> for ApiError {
    fn from(e: SignInError) -> Self {
        match e {
            SignInError::Wrong(_) => ApiError::Unauthorized(e.to_string()),
            SignInError::Locked => ApiError::TooManyRequests(e.to_string()),
            SignInError::Busy(e) => e.into(),
            SignInError::Internal(e) => ApiError::Internal(e),
        }
    }
}

/// The longest typed name the audit trail keeps of a failed sign-in, in characters.
const MAX_AUDITED_NAME_CHARS: usize = 64;

impl From<HashError> for SignInError {
    fn from(e: HashError) -> Self {
        match e {
            HashError::Busy => SignInError::Busy(e),
            HashError::Internal(e) => SignInError::Internal(e),
        }
    }
}

/// Checks a name and secret from `address`. A throttled account or address is
/// refused before its secret is checked, even if the secret is right; every
/// other attempt counts as a failure until its secret proves right. The turn
/// to hash is taken first, so an attempt turned away as busy is not counted.
pub async fn check(
    store: &dyn Store,
    gate: &HashGate,
    typed_name: &str,
    secret: Secret,
    proof: Proof,
    address: &str,
) -> Result<User, SignInError> {
    let turn = gate.turn().await?;
    let now = Timestamp::now();
    let account_key = throttle::account_key(typed_name);
    let address_key = throttle::address_key(address);
    let subject: String = typed_name
        .trim()
        .chars()
        .take(MAX_AUDITED_NAME_CHARS)
        .collect();
    let failures = store
        .claim_sign_in_attempt(
            account_key.clone(),
            address_key.clone(),
            now,
            throttle::window_start(now),
        )
        .await?;
    if failures.locked() {
        store
            .record_audit(
                AuditEvent::now(Actor::Anonymous, Action::SignInThrottled, subject)
                    .from_address(address)
                    .detail(json!({"account_failures": failures.account, "address_failures": failures.address})),
            )
            .await?;
        return Err(SignInError::Locked);
    }
    let stored = match UserName::parse(typed_name) {
        Ok(name) => store.credentials(&name).await?,
        Err(_) => None,
    };
    let hash = stored.as_ref().and_then(|c| match proof {
        Proof::Password => Some(c.password.clone()),
        Proof::Pin => c.pin.clone(),
    });
    if turn.verify(secret, hash).await? {
        store
            .sign_in_succeeded(account_key, address_key, now)
            .await?;
        let user = stored
            .expect("a secret verified only against a stored hash, so the user exists")
            .user;
        return Ok(user);
    }
    let proof_name = match proof {
        Proof::Password => "password",
        Proof::Pin => "pin",
    };
    // The attempt was already counted as a failure when it was claimed.
    store
        .record_audit(
            AuditEvent::now(Actor::Anonymous, Action::SignInFailed, subject)
                .from_address(address)
                .detail(json!({"proof": proof_name})),
        )
        .await?;
    Err(SignInError::Wrong(proof))
}
