//! Slack: weakened predictions, row requirements and the two-stage covering LPs.
//!
//! Everything here works on plain numbers (predictions, counts, sparse rows); the
//! analysis that turns circuits into rows lives elsewhere and calls in (method.md 4-5).

pub mod lp;
pub mod null;
pub mod projection;
pub mod requirement;
