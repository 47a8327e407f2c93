//! isopach: thin-film thickness maps of semiconductor wafers.
//!
//! Data flows one way: a [`recipe`] becomes a plan of sites ([`run::plan`]), the sequencer
//! drives a [`bench`] (G-code stage + spectrometer, real or simulated), each spectrum is fitted
//! ([`fit`]) through the optical model ([`optics`]), and the results become uniformity
//! statistics and contour maps ([`map`]). The pure core (recipe, optics, spectrum, fit, map,
//! the G-code state machine) does no I/O; ports, processes and files live at the edges.

// Checks are written `!(x >= lo)` on purpose: they reject NaN as well as out-of-range values.
#![allow(clippy::neg_cmp_op_on_partial_ord)]

pub mod bench;
pub mod compare;
pub mod error;
pub mod error_text;
pub mod fit;
pub mod history;
pub mod map;
pub mod optics;
pub mod recipe;
pub mod run;
pub mod site_list;
pub mod spectrum;
pub mod tomlcheck;
