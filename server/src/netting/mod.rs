//! Netting: a count judged against the stock movements made while it was
//! taken, so no aisle has to be frozen (DESIGN §4), and the tolerance and
//! recount rules that decide what happens to a difference (§5).
//!
//! Both files are pure arithmetic with no I/O: `rule` (windows, feasible
//! book states, the nearest state, settling) and `tolerance` (hits, recount
//! outcomes). The store and the routes that feed them live elsewhere.

pub mod rule;
pub mod tolerance;

#[cfg(test)]
mod tests;
