//! Sign-in throttling: failed sign-ins are counted per account name and per
//! client address over a sliding window. The account key is the name as typed,
//! whether or not such a user exists, so the answer never hints at that.

use crate::time::Timestamp;

/// How far back failed sign-ins count, in milliseconds (15 minutes).
pub const WINDOW_MS: i64 = 15 * 60 * 1000;
/// Failed sign-ins of one account within the window that lock it.
pub const MAX_ACCOUNT_FAILURES: u32 = 5;
/// Failed sign-ins from one address within the window that block it.
pub const MAX_ADDRESS_FAILURES: u32 = 20;
/// What a throttled sender is told: the same for every name, known or not.
pub const LOCKED_TEXT: &str = "Too many failed sign-ins for this account or from this address. \
     Try again in 15 minutes, or ask an admin to lift the lock.";

/// Failed sign-ins within the window, as the store counted them.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Failures {
    pub account: u32,
    pub address: u32,
}

impl Failures {
    /// Tells whether a sign-in must be refused before its secret is even checked.
    pub fn locked(self) -> bool {
        self.account >= MAX_ACCOUNT_FAILURES || self.address >= MAX_ADDRESS_FAILURES
    }
}

/// Returns the throttling key of an account name (lower-cased as typed).
pub fn account_key(name: &str) -> String {
    format!("account:{}", name.trim().to_ascii_lowercase())
}

/// Returns the throttling key of a client address.
pub fn address_key(address: &str) -> String {
    format!("address:{address}")
}

/// Returns the start of the window that ends at `now`.
pub fn window_start(now: Timestamp) -> Timestamp {
    now.plus_ms(-WINDOW_MS)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_lock_starts_at_the_limit_of_either_key() {
        let under = Failures {
            account: MAX_ACCOUNT_FAILURES - 1,
            address: MAX_ADDRESS_FAILURES - 1,
        };
        assert!(!under.locked());
        assert!(
            Failures {
                account: MAX_ACCOUNT_FAILURES,
                ..under
            }
            .locked()
        );
        assert!(
            Failures {
                address: MAX_ADDRESS_FAILURES,
                ..under
            }
            .locked()
        );
    }

    #[test]
    fn account_keys_ignore_case_and_surrounding_space() {
        assert_eq!(account_key(" Ada "), account_key("ada"));
    }
}
