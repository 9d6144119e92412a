//! gRPC handlers, one module per service. Each handler validates, converts the request to
//! domain values, makes one call into the store or the forecaster, and converts back.

pub mod access_api;
pub mod backup_api;
pub mod due_queries;
pub mod due_watch;
pub mod fleet_api;
pub mod forecast_api;
pub mod forecast_views;
pub mod ingest;
pub mod maintenance_api;
pub mod paging;
pub mod part_cycles;
pub mod refusals;
pub mod service_records;
pub mod telemetry_api;
pub mod visit_plans;
