//! The cap on password and PIN hashing running at once.
//!
//! Each argon2id hash holds [`HASH_MEMORY_KIB`](super::secret::HASH_MEMORY_KIB)
//! of memory while it runs, so without a cap a flood of sign-ins grows the
//! process by that much for every request in flight. Every hash a request
//! causes (sign-in, phone enrolment, adding a user) takes a turn from one
//! [`HashGate`]; a request waits a bounded time for its turn and is then told
//! to come back later (429 with `Retry-After`), never queued without bound.

use super::secret::{self, HashMemory, Secret, SecretHash};
use std::sync::{Arc, Mutex};
use std::time::Duration;
use tokio::sync::{OwnedSemaphorePermit, Semaphore};

/// Hashes allowed at once per core the machine reports (the default limit).
pub const HASHES_PER_CORE: usize = 2;
/// How long a request waits for a turn to hash by default, in milliseconds.
pub const DEFAULT_HASH_WAIT_MS: u64 = 1_000;
/// What a turned-away sender is told to wait before trying again, in seconds.
pub const BUSY_RETRY_AFTER_S: u64 = 2;
/// What a turned-away sender reads.
pub const BUSY_TEXT: &str =
    "The server is busy checking other sign-ins. Try again in a few seconds.";

/// Returns the default cap: [`HASHES_PER_CORE`] × the cores available.
pub fn default_max_concurrent_hashes() -> usize {
    std::thread::available_parallelism().map_or(1, |n| n.get()) * HASHES_PER_CORE
}

/// Why a hash did not run.
#[derive(Debug, thiserror::Error)]
pub enum HashError {
    /// Every turn stayed taken for the whole wait.
    #[error("{BUSY_TEXT}")]
    Busy,
    #[error(transparent)]
    Internal(#[from] anyhow::Error),
}

/// The shared cap on hashes running at once (cheap to clone).
#[derive(Clone, Debug)]
pub struct HashGate {
    turns: Arc<Semaphore>,
    /// Working memory of turns that ended, for the next ones: never more
    /// blocks than turns, each allocated once.
    spare: Arc<Mutex<Vec<HashMemory>>>,
    max: usize,
    wait: Duration,
}

/// One turn to hash, with its working memory: held until the hash it is
/// spent on has finished, then the memory goes back to the gate.
#[derive(Debug)]
pub struct HashTurn {
    memory: Option<HashMemory>,
    spare: Arc<Mutex<Vec<HashMemory>>>,
    _permit: OwnedSemaphorePermit,
}

impl Drop for HashTurn {
    fn drop(&mut self) {
        if let Some(memory) = self.memory.take() {
            self.spare
                .lock()
                .expect("the spare list is never left half-changed")
                .push(memory);
        }
    }
}

impl HashGate {
    /// Makes a gate letting `max_concurrent` hashes run at once (at least one),
    /// where a request waits at most `wait` for its turn.
    pub fn new(max_concurrent: usize, wait: Duration) -> Self {
        let max = max_concurrent.max(1);
        Self {
            turns: Arc::new(Semaphore::new(max)),
            spare: Arc::new(Mutex::new(Vec::with_capacity(max))),
            max,
            wait,
        }
    }

    /// Returns how many hashes may run at once.
    pub fn max_concurrent(&self) -> usize {
        self.max
    }

    /// Waits up to the gate's wait for a turn; `Busy` if none came free.
    pub async fn turn(&self) -> Result<HashTurn, HashError> {
        match tokio::time::timeout(self.wait, self.turns.clone().acquire_owned()).await {
            Ok(Ok(permit)) => {
                let memory = self
                    .spare
                    .lock()
                    .expect("the spare list is never left half-changed")
                    .pop();
                Ok(HashTurn {
                    // A new turn's memory is allocated on the blocking thread, not here.
                    memory,
                    spare: self.spare.clone(),
                    _permit: permit,
                })
            }
            Ok(Err(_)) => Err(HashError::Internal(anyhow::anyhow!(
                "the hashing gate was closed"
            ))),
            Err(_) => Err(HashError::Busy),
        }
    }

    /// Hashes a secret in its turn.
    pub async fn hash(&self, secret: Secret) -> Result<SecretHash, HashError> {
        Ok(self.turn().await?.hash(secret).await?)
    }
}

impl HashTurn {
    /// Hashes a secret on a blocking thread, keeping the turn until it is done.
    pub async fn hash(self, secret: Secret) -> anyhow::Result<SecretHash> {
        self.run(move |memory| secret::hash_with(memory, &secret))
            .await
            .map_err(|e| anyhow::anyhow!("the hashing task failed: {e}"))
    }

    /// Checks a secret on a blocking thread (a decoy when nothing is stored,
    /// answering false), keeping the turn until it is done.
    pub async fn verify(self, secret: Secret, stored: Option<SecretHash>) -> anyhow::Result<bool> {
        self.run(move |memory| secret::verify_or_decoy(memory, &secret, stored.as_ref()))
            .await
            .map_err(|e| anyhow::anyhow!("the verifying task failed: {e}"))
    }

    /// Runs `work` on a blocking thread with the turn's memory. The turn moves
    /// into the task: if the request is dropped meanwhile, the memory is still
    /// in use until the work ends, and only then is the turn given back.
    async fn run<T: Send + 'static>(
        mut self,
        work: impl FnOnce(&mut HashMemory) -> T + Send + 'static,
    ) -> Result<T, tokio::task::JoinError> {
        tokio::task::spawn_blocking(move || {
            let memory = self.memory.get_or_insert_with(HashMemory::new);
            let out = work(memory);
            drop(self);
            out
        })
        .await
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[tokio::test]
    async fn a_full_gate_turns_a_request_away_after_its_wait_and_frees_when_a_turn_ends() {
        let gate = HashGate::new(1, Duration::from_millis(20));
        let held = gate.turn().await.expect("the first turn is free");
        assert!(matches!(gate.turn().await, Err(HashError::Busy)));
        drop(held);
        assert!(gate.turn().await.is_ok());
    }

    #[tokio::test]
    async fn a_turn_is_held_until_its_hash_has_finished() {
        let gate = HashGate::new(1, Duration::ZERO);
        let turn = gate.turn().await.unwrap();
        let hash = turn
            .hash(Secret::new("a passphrase of ours"))
            .await
            .unwrap();
        assert!(hash.0.starts_with("$argon2id$"));
        assert!(
            gate.turn().await.is_ok(),
            "the turn came back after the hash"
        );
    }

    #[test]
    fn a_zero_limit_still_lets_one_hash_run() {
        assert_eq!(HashGate::new(0, Duration::ZERO).max_concurrent(), 1);
    }
}
