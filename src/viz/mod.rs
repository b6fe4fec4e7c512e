//! Layer 6 — pictures: one chart toolkit ([`chart`]), one palette ([`colormap`]), and the
//! pictures of a result file ([`plot`]).

pub mod chart;
pub mod colormap;
pub mod plot;
