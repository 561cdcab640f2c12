//! Feedback loops (docs/definitions.md, "Feedback links"): the loop group's network
//! (`group.rs`), its part in the AC pass and the loop's figures (`solve.rs`), and the
//! margin scan on any return ratio T(jω) (`margins.rs`).

pub mod group;
pub mod margins;
pub mod solve;

pub use solve::LoopAc;
