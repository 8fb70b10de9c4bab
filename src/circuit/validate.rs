//! Validation of a circuit set against a layout.
