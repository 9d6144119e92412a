//! `ForecastService` (placeholder: UNIMPLEMENTED until the forecast issue lands).

use std::pin::Pin;

use brakeledger_proto::v1 as pb;
use pb::forecast_service_server::ForecastService;
use tokio_stream::Stream;
use tonic::{Request, Response, Status};

use crate::state::AppState;

/// Implements `brakeledger.v1.ForecastService`.
pub struct ForecastApi {
    #[allow(dead_code)]
    state: AppState,
}

impl ForecastApi {
    /// Handlers over shared state.
    pub fn new(state: AppState) -> Self {
        Self { state }
    }
}

type WatchStream = Pin<Box<dyn Stream<Item = Result<pb::WatchDueEvent, Status>> + Send>>;

#[tonic::async_trait]
impl ForecastService for ForecastApi {
    type WatchDueStream = WatchStream;

    async fn get_vehicle_forecast(&self, _: Request<pb::GetVehicleForecastRequest>) -> Result<Response<pb::GetVehicleForecastResponse>, Status> {
        Err(Status::unimplemented("GetVehicleForecast"))
    }
    async fn list_due(&self, _: Request<pb::ListDueRequest>) -> Result<Response<pb::ListDueResponse>, Status> {
        Err(Status::unimplemented("ListDue"))
    }
    async fn watch_due(&self, _: Request<pb::WatchDueRequest>) -> Result<Response<Self::WatchDueStream>, Status> {
        Err(Status::unimplemented("WatchDue"))
    }
    async fn get_wear_trajectory(&self, _: Request<pb::GetWearTrajectoryRequest>) -> Result<Response<pb::GetWearTrajectoryResponse>, Status> {
        Err(Status::unimplemented("GetWearTrajectory"))
    }
    async fn plan_visits(&self, _: Request<pb::PlanVisitsRequest>) -> Result<Response<pb::PlanVisitsResponse>, Status> {
        Err(Status::unimplemented("PlanVisits"))
    }
}
