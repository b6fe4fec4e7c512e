//! Layer 6 — studies that launch runs: strong/weak/threads scaling and the accuracy study
//! against the exact reference.

pub mod accuracy;
pub mod checks;
pub mod refcache;
pub mod scaling;
pub mod systematic;
pub mod transmission;
pub mod validate;
