//! Building blocks that stages and methods share, each in a file named for
//! what it computes. A block depends on no stage or method.

pub mod blur;
pub mod centres;
pub mod components;
pub mod fixed_point;
pub mod orientation;
pub mod point_pattern;
pub mod select;
pub mod spectrum;
