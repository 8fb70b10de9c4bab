//! The one-qubit Clifford group, its compilation to native gates, and a stabilizer tableau.
