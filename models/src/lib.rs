//! # brakeledger-models
//!
//! Pure computation for brakeledger: no I/O, no async, no storage. The service feeds these
//! functions stored data and serves their answers.
//!
//! Brakes are safety parts. The forecasts here support maintenance planning; they do not
//! replace inspection by a qualified technician or the roadworthiness rules that apply locally.
//!
//! # Layout
//! - [`domain`]: vehicles, axles, components and their validity rules.
//! - [`plausibility`]: physical limits a trip summary must respect before it is stored.
//! - [`settings`]: the settings of the fit, the pooling and the forecast.
//! - [`error`]: the crate's one error enum, [`ModelError`].
//! - [`regression`]: least squares via linfa, with covariance, standard errors, prediction
//!   intervals and Fieller inverse intervals.
//! - [`line_fit`]: the closed-form straight line with per-group intercepts (the wear fit's
//!   lean path, no allocation).
//! - [`wear_history`]: a part's dated replacements and inspections, and its wear cycles.
//! - [`wear_fit`]: the wear rate (mm/MJ) from the vehicle's own inspections.
//! - [`random_effects`]: between-unit variance and pooled mean (DerSimonian–Laird, Paule–Mandel).
//! - [`pooling`]: the fleet prior per group (empirical Bayes) and its combination with a fit.
//! - [`energy_rate`]: recency-weighted daily friction energy at a brake.
//! - [`first_passage`]: the inverse Gaussian time to dissipate a remaining energy.
//! - [`quasi_random`]: Sobol points and their normal scores for the due-date integral.
//! - [`forecast`]: due-date distributions and thickness trajectories.
//! - [`vehicle_forecast`]: all parts of one vehicle together, rotors borrowing from their pads.
//! - [`visit_plan`]: workshop visits that book parts before their due dates.
//! - [`pipeline`]: fits, fleet priors and forecasts for many parts in one call.
//! - [`physics`]: braking energy of a speed trace, axle split, heat partition and rotor heating.
//! - [`simulator`]: a seeded fleet simulator with hidden true crossing days (invented data).
//! - [`stress_fleet`]: a second, independent fleet generator that breaks the model's
//!   assumptions on purpose (invented data).
//! - [`calibration`]: band coverage and due-date error on a simulated fleet, with baselines.

pub mod calibration;
pub mod day_sort;
pub mod domain;
pub mod energy_rate;
pub mod error;
pub mod first_passage;
pub mod forecast;
pub mod line_fit;
pub mod physics;
pub mod pipeline;
pub mod plausibility;
pub mod pooling;
pub mod quasi_random;
pub mod random_effects;
pub mod regression;
pub mod visit_plan;
pub mod settings;
pub mod simulator;
pub mod stress_fleet;
pub mod vector_exp;
pub mod vehicle_forecast;
pub mod wear_fit;
pub mod wear_history;

pub use error::ModelError;
pub use forecast::{
    forecast_part, DueDistribution, ForecastBasis, ForecastSettings, PartOutlook, TrajectoryPoint,
};
pub use pooling::{estimate_prior, RatePrior, WearPrior};
pub use wear_fit::{fit_part, WearFit};
pub use wear_history::{PartEvent, PartEventKind, PartHistory};
