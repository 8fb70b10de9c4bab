//! The crosstalk-free product model: channels, row predictions and the maximum-likelihood fit.
//!
//! A row is a plain program on a block of one or two qubit slots ([`Row`]), independent of
//! the circuit format; [`PreparedRow`] caches its ideal part once. [`predict`] gives a
//! row's outcome distribution with analytic derivatives, and [`fit`] maximises the
//! multinomial likelihood of reference rows (method.md sections 3 and 8).

pub mod channel;
pub mod fit;
pub mod predict;
pub mod ptm;

pub use channel::{Family, KindIx, KindParams, ModelSpec, Params, Readout};
pub use fit::{
    fit, fit_checked, fit_coupler, fit_qubit, fit_qubit_checked, start_check, FitOptions,
    FitResult, Free, KindFit, ReadoutFit, StartCheck,
};
pub use predict::{predict, predict_all, ParamRef, Prediction, PreparedRow};

use crate::gate::Gate;
use crate::layout::QubitIx;

/// A gate application inside a row: the ideal gate, followed by the error channel of
/// `kind` when it is an operation occurrence (`None` for virtual or error-free gates).
#[derive(Copy, Clone, Debug, PartialEq)]
pub struct Action {
    /// The ideal gate.
    pub gate: Gate,
    /// Rotation angle in radians (0 for gates without one).
    pub angle: f64,
    /// The operation kind whose error channel follows the gate, if any.
    pub kind: Option<KindIx>,
}

impl Action {
    /// An error-free gate.
    pub fn ideal(gate: Gate, angle: f64) -> Action {
        Action { gate, angle, kind: None }
    }

    /// An occurrence of `kind`: the ideal gate, then the kind's error channel.
    pub fn occurrence(gate: Gate, angle: f64, kind: KindIx) -> Action {
        Action { gate, angle, kind: Some(kind) }
    }
}

/// One layer of a row's program.
#[derive(Copy, Clone, Debug, PartialEq)]
pub enum Step {
    /// One-qubit actions per slot; slot 1 must be `None` in a one-qubit row. Errors of the
    /// two slots act after both ideal gates (they commute: disjoint supports).
    Local([Option<Action>; 2]),
    /// A two-qubit gate on the block whose first operand is slot 0 (slot 1 if `reversed`).
    /// A two-qubit kind's error channel is always written in slot order (slot 0 first), so
    /// the caller must give a kind the same slot order in every row.
    Joint {
        /// The gate and its kind.
        action: Action,
        /// True when the gate's first operand is slot 1.
        reversed: bool,
    },
}

/// One row of the analysis: a block's program, its readout qubits and observed counts.
///
/// `readout[j]` is the qubit whose readout confusion applies to slot j (so the row has
/// `readout.len()` slots, 1 or 2); `counts[x]` is the number of shots with outcome x,
/// bit j of x being slot j. The block starts in |0...0>.
#[derive(Clone, Debug, PartialEq)]
pub struct Row {
    /// The layers, in time order.
    pub steps: Vec<Step>,
    /// Readout qubit per slot.
    pub readout: Vec<QubitIx>,
    /// Shots per outcome (2 or 4 entries).
    pub counts: Vec<u64>,
}
