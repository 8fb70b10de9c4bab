//! Slack: weakened predictions, row requirements and the two-stage covering LPs.
