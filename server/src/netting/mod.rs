//! Netting: a count judged against the stock movements made while it was
//! taken, so no aisle has to be frozen (DESIGN §4), and the tolerance and
//! recount rules that decide what happens to a difference (§5).
//!
//! Pure arithmetic with no I/O: `rule` (windows, feasible book states, the
//! nearest state, settling), `tolerance` (hits, recount outcomes) and `service`
//! (a pass's facts to the rows to write, recount placement and effects). The
//! store (`store/sqlite/netting`) gathers the facts and writes inside the sync
//! and movement transactions; `routes` serves results and policy, and `pages`
//! the count-policy page, whose forms `policy_form` reads (no I/O).

pub mod pages;
pub mod pass;
pub mod policy_form;
pub mod recount;
pub mod report;
pub mod results;
pub mod routes;
pub mod rule;
pub mod service;
pub mod settle;
pub mod tolerance;

#[cfg(test)]
mod memory;
#[cfg(test)]
mod tests;
