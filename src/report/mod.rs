//! Output formats, kept apart from measurement: one module per format. Every format is
//! deterministic (no timestamps, fixed float formatting) so outputs can be compared byte for byte.

pub mod campaign;
pub mod charts;
pub mod crops;
pub mod csv;
pub mod groups;
pub mod html;
pub mod json;
pub mod measures;
pub mod plots;
pub mod text;
pub mod validate;
