//! slackmap: a crosstalk audit for multi-qubit processors.
//!
//! The library holds every computation; the `slackmap` binary only parses arguments,
//! calls in here and prints. Modules follow the data flow: layout, circuit and counts
//! (inputs), design and simulate (making circuits and data), rows (blocks, occurrences and
//! contexts), model (the crosstalk-free fit), slack (requirements and covering LPs), the
//! pipeline that chains them for the point pass and every replicate, confidence
//! (replicates and intervals), and the audit that ties them together. See DEVELOPERS.md for the architecture.
#![warn(missing_docs)]

pub mod audit;
mod bitset;
pub mod check;
pub mod circuit;
pub mod clifford;
pub mod compare;
pub mod confidence;
pub mod counts;
pub mod design;
pub mod error;
pub mod files;
pub mod gate;
pub mod hints;
pub mod layout;
pub mod limits;
pub mod model;
pub mod pipeline;
pub mod plan;
pub mod report;
pub mod rows;
pub mod simulate;
pub mod slack;
pub mod stats;

pub use error::{Error, Result, Warning};
