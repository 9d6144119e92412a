//! `FleetService`: fleets and vehicles.

use brakeledger_proto::v1 as pb;
use pb::fleet_service_server::FleetService;
use tonic::{Request, Response, Status};

use crate::auth::{Caller, Permission};
use crate::convert::{check_id, ms_timestamp, require_ids};
use crate::error::ServiceError;
use crate::grpc::due_queries::known_fleet;
use crate::grpc::paging::{decode_token, encode_token, page_size};
use crate::state::AppState;
use crate::store::{FleetRecord, VehicleRecord};

/// Implements `brakeledger.v1.FleetService`.
pub struct FleetApi {
    state: AppState,
}

impl FleetApi {
    /// Handlers over shared state.
    pub fn new(state: AppState) -> Self {
        Self { state }
    }
}

#[tonic::async_trait]
impl FleetService for FleetApi {
    async fn upsert_fleet(&self, request: Request<pb::UpsertFleetRequest>) -> Result<Response<pb::UpsertFleetResponse>, Status> {
        let caller = Caller::of(&request)?;
        let fleet = request.into_inner().fleet.ok_or_else(|| ServiceError::invalid("fleet", "is required"))?;
        caller.require(&fleet.fleet_id, Permission::AdministerFleet)?;
        let record = FleetRecord::try_from(fleet)?;
        let stored = record.clone();
        let created = self.state.blocking(move |store| Ok(store.upsert_fleet(&stored)?)).await?;
        let subject = format!("fleet settings: time zone {}, name '{}'", record.time_zone, record.display_name);
        self.state.audit(&caller, &record.fleet_id, "brakeledger.v1.FleetService/UpsertFleet", subject).await;
        Ok(Response::new(pb::UpsertFleetResponse { fleet: Some(record.into()), created }))
    }

    async fn get_fleet(&self, request: Request<pb::GetFleetRequest>) -> Result<Response<pb::GetFleetResponse>, Status> {
        let caller = Caller::of(&request)?;
        let fleet_id = request.into_inner().fleet_id;
        caller.require(&fleet_id, Permission::ReadFleet)?;
        require_ids(&[("fleet_id", &fleet_id)])?;
        let response = self
            .state
            .blocking(move |store| {
                let fleet = known_fleet(store, &fleet_id)?;
                Ok(pb::GetFleetResponse {
                    vehicle_count: store.count_vehicles(&fleet_id)?,
                    forecasts_pending: store.count_stale(&fleet_id)?,
                    fleet: Some(fleet.into()),
                })
            })
            .await?;
        Ok(Response::new(response))
    }

    async fn upsert_vehicle(&self, request: Request<pb::UpsertVehicleRequest>) -> Result<Response<pb::UpsertVehicleResponse>, Status> {
        let caller = Caller::of(&request)?;
        let vehicle = request.into_inner().vehicle.ok_or_else(|| ServiceError::invalid("vehicle", "is required"))?;
        caller.require(&vehicle.fleet_id, Permission::AdministerFleet)?;
        let record = VehicleRecord::try_from(vehicle)?;
        let stored = record.clone();
        let created = self.state.blocking(move |store| Ok(store.upsert_vehicle(&stored)?)).await?;
        self.state.wake_forecaster.notify_one();
        let subject = format!("vehicle {} ({}, {} axles){}", record.vehicle_id, record.spec.vehicle_class, record.spec.axles.len(), if created { " registered" } else { " replaced" });
        self.state.audit(&caller, &record.fleet_id, "brakeledger.v1.FleetService/UpsertVehicle", subject).await;
        Ok(Response::new(pb::UpsertVehicleResponse { vehicle: Some(record.into()), created }))
    }

    async fn get_vehicle(&self, request: Request<pb::GetVehicleRequest>) -> Result<Response<pb::GetVehicleResponse>, Status> {
        let caller = Caller::of(&request)?;
        let request = request.into_inner();
        caller.require(&request.fleet_id, Permission::ReadFleet)?;
        require_ids(&[("fleet_id", &request.fleet_id), ("vehicle_id", &request.vehicle_id)])?;
        let vehicle = self.state.vehicle(&request.fleet_id, &request.vehicle_id).await?;
        let totals = self
            .state
            .blocking(move |store| Ok(store.vehicle_totals(&request.fleet_id, &request.vehicle_id)?))
            .await?;
        Ok(Response::new(pb::GetVehicleResponse {
            vehicle: Some(vehicle.into()),
            trips_recorded: totals.trips_recorded,
            friction_energy_j: totals.friction_energy_j,
            last_trip_end: totals.last_trip_end_ms.map(ms_timestamp),
            distance_m: totals.distance_m,
        }))
    }

    async fn list_vehicles(&self, request: Request<pb::ListVehiclesRequest>) -> Result<Response<pb::ListVehiclesResponse>, Status> {
        let caller = Caller::of(&request)?;
        let request = request.into_inner();
        caller.require(&request.fleet_id, Permission::ReadFleet)?;
        check_id("fleet_id", &request.fleet_id).map_err(|v| ServiceError::InvalidArgument(vec![v]))?;
        let after = if request.page_token.is_empty() {
            None
        } else {
            let mut parts = decode_token(&request.page_token, 2)?;
            if parts[0] != request.fleet_id {
                return Err(ServiceError::invalid("page_token", "belongs to another fleet").into());
            }
            parts.pop()
        };
        let limit = page_size(request.page_size);
        let fleet_id = request.fleet_id.clone();
        let mut vehicles = self
            .state
            .blocking(move |store| Ok(store.list_vehicles(&fleet_id, after.as_deref(), limit + 1)?))
            .await?;
        let next_page_token = if vehicles.len() > limit {
            vehicles.truncate(limit);
            vehicles.last().map(|v| encode_token(&[&request.fleet_id, &v.vehicle_id])).unwrap_or_default()
        } else {
            String::new()
        };
        Ok(Response::new(pb::ListVehiclesResponse {
            vehicles: vehicles.into_iter().map(Into::into).collect(),
            next_page_token,
        }))
    }

    async fn list_fleets(&self, request: Request<pb::ListFleetsRequest>) -> Result<Response<pb::ListFleetsResponse>, Status> {
        // Operators see every fleet; a fleet token sees its own fleet, when it may read it.
        let caller = Caller::of(&request)?;
        let fleets = self
            .state
            .blocking(move |store| {
                let mut fleets = Vec::new();
                for fleet_id in store.list_fleet_ids()? {
                    if !caller.may(&fleet_id, Permission::ReadFleet) {
                        continue;
                    }
                    let stored = store.get_fleet(&fleet_id)?;
                    fleets.push(pb::FleetSummary {
                        set_up: stored.is_some(),
                        vehicle_count: store.count_vehicles(&fleet_id)?,
                        fleet: Some(stored.unwrap_or_else(|| FleetRecord::default_for(&fleet_id)).into()),
                    });
                }
                Ok(fleets)
            })
            .await?;
        Ok(Response::new(pb::ListFleetsResponse { fleets }))
    }
}
