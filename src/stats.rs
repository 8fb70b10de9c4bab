//! Statistical helpers: chi-squared quantiles (NIST/SEMATECH e-Handbook 1.3.6.7.4).
