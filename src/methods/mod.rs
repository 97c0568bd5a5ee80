//! Measurement methods, side by side. Each takes a [`crate::preprocess::Prepared`]
//! image and returns its own result type, in pixels; calibration to
//! micrometres happens in the pipeline, once.

pub mod fft;
pub mod intercept;
pub mod spectrum;
