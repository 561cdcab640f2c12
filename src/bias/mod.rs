//! The bias designer (`ampchain bias`): place a stage's Q point where its swing needs
//! it — centred on the AC load line, at a given collector current or V_CE, or as
//! symmetrical as the stage's gain band allows — in resistor values of an IEC 60063
//! series, with the whole chain re-evaluated for every candidate.
//!
//! - [`target`]: the centring formula and the conditions a design meets;
//! - [`knob`]: the resistors a design may move, by chain-file key;
//! - [`design`]: continuous solution, candidates in the series, exact ranking;
//! - [`code`]: IEC 60062 value codes for writing values back;
//! - [`edit`]: the chain file's text with only the changed values replaced;
//! - [`report`]: what `ampchain bias` prints, as a table or JSON.

pub mod code;
pub mod design;
pub mod edit;
pub mod knob;
pub mod report;
pub mod target;

pub use design::{design, BiasError, Metrics, Outcome, Proposal, Request, Setting};
pub use knob::{Field, Knob};
pub use target::{centred_i_c, Condition, Target};
