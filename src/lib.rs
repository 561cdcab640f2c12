pub mod eseries;
pub mod spec;
pub mod units;
