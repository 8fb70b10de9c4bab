//! `check`: validates layout, circuits and counts together and summarises them.
