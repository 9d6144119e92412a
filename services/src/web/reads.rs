//! The questions the page asks, each answered by the gRPC handler a client would call
//! ([`ForecastApi`], [`FleetApi`]) with the page's caller attached as the access interceptor
//! would attach it. Validation, fleet scoping, roles, NOT_FOUND for unknown fleets and every
//! other rule are therefore the API's own; a refusal arrives as the same gRPC status.

use brakeledger_proto::v1 as pb;
use chrono::{DateTime, NaiveDate, Utc};
use pb::fleet_service_server::FleetService;
use pb::forecast_service_server::ForecastService;

use crate::auth::Caller;
use crate::cli::dates::{start_of_day, to_timestamp};
use crate::error::WebError;
use crate::grpc::fleet_api::FleetApi;
use crate::grpc::forecast_api::ForecastApi;
use crate::grpc::paging::MAX_PAGE_SIZE;
use crate::part_names::VehicleIndex;
use crate::state::AppState;

/// A fleet's due list: every page of ListDue.
#[derive(Debug, Clone, Default)]
pub struct DueParts {
    /// Dated parts, earliest first.
    pub parts: Vec<pb::DuePart>,
    /// Parts that cannot be forecast.
    pub undated: Vec<pb::UndatedPart>,
}

/// What a workshop plan asks for.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PlanAsk {
    /// First day (fleet's time zone).
    pub first_day: NaiveDate,
    /// Days in the plan, the first included.
    pub days: u32,
    /// Workshop hours per day.
    pub hours_per_day: f64,
}

/// Reads for one caller.
pub struct Reader {
    forecast: ForecastApi,
    fleet: FleetApi,
    caller: Caller,
}

impl Reader {
    /// Reads as `caller`.
    pub fn new(state: &AppState, caller: Caller) -> Self {
        Self { forecast: ForecastApi::new(state.clone()), fleet: FleetApi::new(state.clone()), caller }
    }

    /// A request as the interceptor hands it to a handler.
    fn ask<T>(&self, message: T) -> tonic::Request<T> {
        let mut request = tonic::Request::new(message);
        request.extensions_mut().insert(self.caller.clone());
        request
    }

    /// ListFleets: the fleets the caller may read.
    pub async fn fleets(&self) -> Result<Vec<pb::FleetSummary>, WebError> {
        Ok(self.fleet.list_fleets(self.ask(pb::ListFleetsRequest {})).await?.into_inner().fleets)
    }

    /// GetFleet.
    pub async fn fleet(&self, fleet_id: &str) -> Result<pb::GetFleetResponse, WebError> {
        Ok(self.fleet.get_fleet(self.ask(pb::GetFleetRequest { fleet_id: fleet_id.to_owned() })).await?.into_inner())
    }

    /// The fleet's time zone (UTC when unset).
    pub async fn time_zone(&self, fleet_id: &str) -> Result<chrono_tz::Tz, WebError> {
        let fleet = self.fleet(fleet_id).await?.fleet.unwrap_or_default();
        Ok(fleet.time_zone.parse().unwrap_or(chrono_tz::UTC))
    }

    /// GetVehicle.
    pub async fn vehicle(&self, fleet_id: &str, vehicle_id: &str) -> Result<pb::GetVehicleResponse, WebError> {
        let request = pb::GetVehicleRequest { fleet_id: fleet_id.to_owned(), vehicle_id: vehicle_id.to_owned() };
        Ok(self.fleet.get_vehicle(self.ask(request)).await?.into_inner())
    }

    /// Every page of ListVehicles, by vehicle identifier.
    pub async fn vehicles(&self, fleet_id: &str) -> Result<VehicleIndex, WebError> {
        let mut vehicles = VehicleIndex::new();
        let mut page_token = String::new();
        loop {
            let request = pb::ListVehiclesRequest { fleet_id: fleet_id.to_owned(), page_size: MAX_PAGE_SIZE as u32, page_token };
            let page = self.fleet.list_vehicles(self.ask(request)).await?.into_inner();
            vehicles.extend(page.vehicles.into_iter().map(|v| (v.vehicle_id.clone(), v)));
            if page.next_page_token.is_empty() {
                return Ok(vehicles);
            }
            page_token = page.next_page_token;
        }
    }

    /// Every page of ListDue before `due_before` (one `component`, or all), with the parts
    /// that cannot be forecast.
    pub async fn due(&self, fleet_id: &str, due_before: DateTime<Utc>, component: pb::Component) -> Result<DueParts, WebError> {
        let mut due = DueParts::default();
        let mut page_token = String::new();
        loop {
            let request = pb::ListDueRequest {
                fleet_id: fleet_id.to_owned(),
                due_before: Some(to_timestamp(due_before)),
                band_level: 0.0,
                component: component as i32,
                page_size: MAX_PAGE_SIZE as u32,
                include_undated: page_token.is_empty(),
                page_token,
            };
            let page = self.forecast.list_due(self.ask(request)).await?.into_inner();
            due.parts.extend(page.parts);
            due.undated.extend(page.undated);
            if page.next_page_token.is_empty() {
                return Ok(due);
            }
            page_token = page.next_page_token;
        }
    }

    /// GetVehicleForecast at the 80 % band.
    pub async fn forecast(&self, fleet_id: &str, vehicle_id: &str) -> Result<pb::GetVehicleForecastResponse, WebError> {
        let request = pb::GetVehicleForecastRequest { fleet_id: fleet_id.to_owned(), vehicle_id: vehicle_id.to_owned(), band_level: 0.0 };
        Ok(self.forecast.get_vehicle_forecast(self.ask(request)).await?.into_inner())
    }

    /// GetWearTrajectory of one part at the 80 % band.
    pub async fn trajectory(&self, fleet_id: &str, vehicle_id: &str, axle_index: u32, component: pb::Component) -> Result<pb::GetWearTrajectoryResponse, WebError> {
        let request = pb::GetWearTrajectoryRequest {
            fleet_id: fleet_id.to_owned(),
            vehicle_id: vehicle_id.to_owned(),
            axle_index,
            component: component as i32,
            band_level: 0.0,
        };
        Ok(self.forecast.get_wear_trajectory(self.ask(request)).await?.into_inner())
    }

    /// PlanVisits with the server's default job hours, bundling and safety margin.
    pub async fn plan(&self, fleet_id: &str, zone: chrono_tz::Tz, ask: PlanAsk) -> Result<pb::PlanVisitsResponse, WebError> {
        let last_day = ask.first_day + chrono::Duration::days(i64::from(ask.days.max(1)) - 1);
        let from = start_of_day(ask.first_day, zone).map_err(WebError::BadQuery)?;
        let to = start_of_day(last_day, zone).map_err(WebError::BadQuery)?;
        let request = pb::PlanVisitsRequest {
            fleet_id: fleet_id.to_owned(),
            from: Some(to_timestamp(from)),
            to: Some(to_timestamp(to)),
            capacity_hours_per_day: ask.hours_per_day,
            ..Default::default()
        };
        Ok(self.forecast.plan_visits(self.ask(request)).await?.into_inner())
    }
}
