//! Tests of the gate: calibration by simulation (batches drawn from the reference's own
//! distribution pass; shifted, rescaled or contaminated batches fail), and the renderings.

mod calibration;
mod render;
