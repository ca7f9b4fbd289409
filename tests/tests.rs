//! One integration-test binary; each module checks one concern against an outside source.

mod common;
