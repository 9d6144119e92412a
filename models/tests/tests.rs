//! Integration tests of brakeledger-models: one binary, one module per topic.

mod calibration;
mod distributions;
mod forecast_behaviour;
mod invariants;
mod nist_least_squares;
mod simulator_checks;
