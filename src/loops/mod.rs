//! Feedback loops (docs/definitions.md, "Feedback links"). The loop group's solve is
//! still to come; what is here works on a return ratio T(jω) from any source.

pub mod margins;
