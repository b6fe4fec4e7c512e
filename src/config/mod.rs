//! Layer 1 — the job: TOML schema, `--set` overrides, validation and the engine's limits.
//! Depends on nothing else in the crate.

pub mod job;
pub mod limits;
