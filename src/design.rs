//! Experiment design: reference, pair, all-active and all-idle contexts, packed by colouring.
