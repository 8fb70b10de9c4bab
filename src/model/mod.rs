//! The crosstalk-free product model: channels, row predictions and the maximum-likelihood fit.
