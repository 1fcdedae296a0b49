//! The library part of the `flexure` command line: the invented demo scenario ([`demo`]) that
//! `flexure demo` runs and `flexure demo-data` writes, kept out of the engine and shared with
//! the tests that check the shipped demo data.

pub mod demo;
