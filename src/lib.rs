//! armspace: secondary dendrite arm spacing from micrographs.

pub mod synth;
