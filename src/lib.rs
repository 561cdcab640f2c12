//! ampchain: plan cascaded transistor amplifier chains.
//!
//! Data flow: chain file → [`spec`] (serde types) → [`chain::Chain`] (values checked,
//! [`graph`] built and validated) → [`evaluate`]: [`dc`] pass → [`ac`] pass →
//! [`headroom`] → [`report`] (table, JSON).

pub mod ac;
pub mod chain;
pub mod dc;
pub mod device;
pub mod error;
pub mod evaluate;
pub mod graph;
pub mod headroom;
pub mod io;
pub mod limits;
pub mod network;
pub mod plot;
pub mod report;
pub mod spec;
pub mod stages;
pub mod units;
pub mod warnings;

pub use chain::Chain;
pub use error::Error;
pub use evaluate::Evaluation;
pub use network::Freq;
