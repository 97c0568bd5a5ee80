//! armspace: secondary dendrite arm spacing (SDAS) from micrographs of cast
//! alloys.
//!
//! Data flows one way through modules named for their stage:
//! [`load`] -> [`calibrate`] -> [`preprocess`] -> [`methods`] -> [`stats`] ->
//! [`interpret`] -> [`report`]; [`pipeline`] runs them over a batch and
//! [`synth`] makes micrographs of known truth.

pub mod annotations;
pub mod blocks;
pub mod calibrate;
pub mod combine;
pub mod console;
pub mod error;
pub mod files;
pub mod interpret;
pub mod journal;
pub mod load;
pub mod manual;
pub mod memory;
pub mod methods;
pub mod overlay;
pub mod packbits;
pub mod pipeline;
pub mod plots;
pub mod preprocess;
pub mod report;
pub mod segment;
pub mod spatial;
pub mod stats;
#[cfg(feature = "synth")]
pub mod synth;
pub mod units;

pub use error::{Error, Result};
