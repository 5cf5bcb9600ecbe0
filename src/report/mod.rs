//! Rendering results: terminal tables, JSON, CSV. Every renderer draws the same typed result.

pub mod compare;
pub mod html;
pub mod imd;
pub mod power;
pub mod response;
pub mod tone;

/// Version of the JSON layout; bumped when a field changes meaning or disappears.
pub const SCHEMA_VERSION: u32 = 1;
