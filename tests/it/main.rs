//! The integration tests, in one binary (each test binary links the engine again).
//! Every check against the outside world names its source beside the test.

mod bad_inputs;
mod calibration;
mod cli;
mod cluster;
mod empirical;
mod encode;
mod family_examples;
mod family_reference;
mod faults;
mod leakage;
mod python;
mod readme;
mod recipes;
mod report;
mod shell_manners;
mod sql;
