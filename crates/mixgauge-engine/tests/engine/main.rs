//! Integration tests of the engine against published results: Gibbs' inequality, the
//! differential entropy of the normal distribution, and the invariants EM must keep.

mod degenerate;
mod determinism;
mod optimum;
mod textbook;
