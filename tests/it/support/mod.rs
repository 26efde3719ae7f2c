//! Helpers shared by the integration tests (one module per kind of helper).

pub mod common;
pub mod store_support;
pub mod source_support;
pub mod checks_fixture;
pub mod soundcard;
