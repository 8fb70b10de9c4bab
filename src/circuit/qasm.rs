//! OpenQASM 3 import and export (the documented subset).
