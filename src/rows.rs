//! Rows of the analysis: blocks, occurrences, contexts and marginal counts.
