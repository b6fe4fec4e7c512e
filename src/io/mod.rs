//! Layer 4 — formats: [`names`] names every dataset, attribute, unit and format version;
//! result files; checkpoints; a readable summary of either.

pub mod attrs;
pub mod axes;
pub mod checkpoint;
pub mod inspect;
pub mod names;
pub mod results;
