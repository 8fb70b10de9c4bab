//! The crosstalk simulator: noise files, context-conditioned channels, shot sampling.
