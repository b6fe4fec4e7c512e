//! Hard limits of the engine that a job is validated against.

/// Largest number of bodies per configuration. Coordinates in flight are fixed arrays of
/// this length, so the hot loop never allocates; raise it to simulate more bodies.
pub const MAX_N: usize = 8;
