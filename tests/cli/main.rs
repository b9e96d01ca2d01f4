//! Command-line tests: every test runs the real `cyclarc` binary in a temporary folder of
//! its own (see `support::cli`).
//!
//! - `bad_input`, `damage`, `crash`, `promises`: robustness (awkward and broken inputs,
//!   damaged archives, kills and I/O faults, the promises of the README);
//! - `commands`, `pipeline`, `roundtrip`: behaviour of each command and layout, round trips
//!   checked against the archive's per-segment budgets.
#[path = "../support/mod.rs"]
mod support;

mod bad_input;
mod commands;
mod crash;
mod damage;
mod looking;
mod pipeline;
mod promises;
mod roundtrip;
mod scale;
mod shards;
