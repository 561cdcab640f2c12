//! ampchain: plan cascaded transistor amplifier chains.
//!
//! Data flow: chain file → [`spec`] (serde types) → [`chain::Chain`] (values checked,
//! [`graph`] built and validated) → [`evaluate`]: [`dc`] pass → [`ac`] pass →
//! [`headroom`] → [`report`] (table, JSON).

pub mod ac;
pub mod annotated;
pub mod bias;
pub mod chain;
pub mod circuit;
pub mod dc;
pub mod device;
pub mod document;
pub mod error;
pub mod eseries;
pub mod evaluate;
pub mod graph;
pub mod headroom;
pub mod io;
pub mod large_signal;
pub mod limits;
pub mod loops;
pub mod network;
pub mod nodal;
pub mod noise;
pub mod plot;
pub mod position;
pub mod report;
pub mod response;
pub mod schema;
pub mod spec;
pub mod spread;
pub mod stages;
pub mod text;
pub mod tune;
pub mod units;
pub mod warnings;

pub use chain::Chain;
pub use error::Error;
pub use evaluate::Evaluation;
pub use network::Freq;
