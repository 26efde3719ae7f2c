//! Helpers shared by the integration tests (one module per kind of helper).

pub mod checks_fixture;
pub mod common;
pub mod demo_store;
pub mod soundcard;
pub mod source_support;
pub mod store_support;
