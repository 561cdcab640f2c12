pub mod spec;
pub mod units;
