//! Integration tests of brakeledger-models: one binary, one module per topic.

mod calibration;
mod distributions;
mod energy_rate_checks;
mod event_order;
mod forecast_behaviour;
mod invariants;
mod nist_least_squares;
mod pooling_behaviour;
mod pooling_reference;
mod vehicle_coupling;
mod simulator_checks;
mod wear_fit_paths;
