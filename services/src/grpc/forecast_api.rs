//! `ForecastService`: one vehicle's forecast, the fleet's due list (paged range scans of the
//! materialised due index), live due-list updates, a part's wear trajectory, and visit plans.

use std::pin::Pin;

use brakeledger_models::domain::{BrakeType, Component};
use brakeledger_models::visit_plan::{PlanLimits, DEFAULT_SAFETY_MARGIN_DAYS};
use brakeledger_proto::v1 as pb;
use pb::forecast_service_server::ForecastService;
use tokio_stream::Stream;
use tonic::{Request, Response, Status};

use crate::auth::{Caller, Permission};
use crate::convert::{check_id, component_from_wire, ms_timestamp, now_ms, require_ids};
use crate::error::{ServiceError, ServiceResult};
use crate::forecaster::{materialise, vehicle_forecast_now};
use crate::grpc::due_queries::{due_parts, known_fleet, scan_due_filtered, undated_parts};
use crate::grpc::due_watch;
use crate::grpc::forecast_views::{band_level, fleet_zone, indexed_band_level, local_date, local_day_number, part_forecast, required_time};
use crate::grpc::paging::{decode_token, encode_token, page_size};
use crate::grpc::visit_plans::{plan_for_due_parts, JobHours};
use crate::grpc::part_cycles::readings_by_cycle;
use crate::state::AppState;
use crate::store::{days_to_ms, DueCursor, FleetRecord, Store, VehicleForecasts, MS_PER_DAY};

/// Implements `brakeledger.v1.ForecastService`.
pub struct ForecastApi {
    state: AppState,
}

impl ForecastApi {
    /// Handlers over shared state.
    pub fn new(state: AppState) -> Self {
        Self { state }
    }
}

fn component_filter(value: i32) -> ServiceResult<Option<Component>> {
    match pb::Component::try_from(value) {
        Ok(pb::Component::Unspecified) => Ok(None),
        Ok(pb::Component::Friction) => Ok(Some(Component::Friction)),
        Ok(pb::Component::Disc) => Ok(Some(Component::Disc)),
        Err(_) => Err(ServiceError::invalid("component", "is not a known component")),
    }
}

fn component_code(component: Option<Component>) -> &'static str {
    match component {
        None => "any",
        Some(Component::Friction) => "friction",
        Some(Component::Disc) => "disc",
    }
}

type WatchStream = Pin<Box<dyn Stream<Item = Result<pb::WatchDueEvent, Status>> + Send>>;

#[tonic::async_trait]
impl ForecastService for ForecastApi {
    type WatchDueStream = WatchStream;

    async fn get_vehicle_forecast(&self, request: Request<pb::GetVehicleForecastRequest>) -> Result<Response<pb::GetVehicleForecastResponse>, Status> {
        let caller = Caller::of(&request)?;
        let r = request.into_inner();
        caller.require(&r.fleet_id, Permission::ReadFleet)?;
        require_ids(&[("fleet_id", &r.fleet_id), ("vehicle_id", &r.vehicle_id)])?;
        let level = band_level("band_level", r.band_level)?;
        let config = self.state.forecast.clone();
        let now = now_ms();
        let (fleet_id, vehicle_id) = (r.fleet_id.clone(), r.vehicle_id.clone());
        let materialised = {
            let (fleet_id, vehicle_id, config) = (fleet_id.clone(), vehicle_id.clone(), config.clone());
            self.state.short_read(move |store| materialised_forecast(store, &fleet_id, &vehicle_id, &config, level, now)).await?
        };
        // The vehicle's spec is read only when computed afresh, or for the error below: a
        // stored forecast answers from one record of the vehicle's own (vehicles are never
        // removed, so a stored forecast's vehicle exists).
        let (fleet, record, spec) = match materialised {
            Some((fleet, record)) => (fleet, record, None),
            None => {
                self.state
                    .blocking(move |store| {
                        let (data, parts) = vehicle_forecast_now(store, &fleet_id, &vehicle_id, &config, level, now)?;
                        Ok((known_fleet(store, &fleet_id)?, materialise(&data, &parts, now), Some(data.vehicle.spec)))
                    })
                    .await?
            }
        };
        let computed_at_ms = record.computed_at_ms;
        if record.parts.iter().all(|p| p.outlook.due.is_none()) {
            let spec = match spec {
                Some(spec) => Some(spec),
                None => {
                    let (fleet_id, vehicle_id) = (r.fleet_id.clone(), r.vehicle_id.clone());
                    self.state.short_read(move |store| Ok(store.get_vehicle(&fleet_id, &vehicle_id)?)).await?.map(|v| v.spec)
                }
            };
            // One clause per part, named as the trade names it: "axle 1 pad: ...".
            let reasons: Vec<String> = record
                .parts
                .iter()
                .map(|p| {
                    let brake = spec.as_ref().and_then(|s| s.axles.get(p.axle_index as usize - 1)).map_or(BrakeType::Disc, |a| a.brake_type);
                    let notes = if p.outlook.notes.is_empty() { "no data".to_owned() } else { p.outlook.notes.join(", ") };
                    format!("axle {} {}: {notes}", p.axle_index, p.component.part_name(brake))
                })
                .collect();
            return Err(ServiceError::FailedPrecondition(format!(
                "no part of vehicle '{}' can be forecast yet. {}",
                r.vehicle_id,
                reasons.join("; ")
            ))
            .into());
        }
        let zone = fleet_zone(&fleet);
        Ok(Response::new(pb::GetVehicleForecastResponse {
            parts: record.parts.iter().map(|p| part_forecast(p, level, level, zone, now)).collect(),
            fleet_id: r.fleet_id,
            vehicle_id: r.vehicle_id,
            time_zone: fleet.time_zone,
            computed_at: Some(ms_timestamp(computed_at_ms)),
            caution: crate::SAFETY_CAUTION.to_owned(),
        }))
    }

    async fn list_due(&self, request: Request<pb::ListDueRequest>) -> Result<Response<pb::ListDueResponse>, Status> {
        let caller = Caller::of(&request)?;
        let r = request.into_inner();
        caller.require(&r.fleet_id, Permission::ReadFleet)?;
        check_id("fleet_id", &r.fleet_id).map_err(|v| ServiceError::InvalidArgument(vec![v]))?;
        let due_before_ms = required_time("due_before", r.due_before.as_ref())?;
        let level = indexed_band_level("band_level", r.band_level)?;
        let component = component_filter(r.component)?;
        let limit = page_size(r.page_size);
        let request_key = [r.fleet_id.clone(), level.code().to_string(), due_before_ms.to_string(), component_code(component).to_owned()];
        let after = if r.page_token.is_empty() {
            None
        } else {
            let parts = decode_token(&r.page_token, 8)?;
            if parts[..4] != request_key {
                return Err(ServiceError::invalid("page_token", "was issued for a different fleet, window, band level or component").into());
            }
            let bad = || ServiceError::invalid("page_token", "is not a token this server issued");
            Some(DueCursor {
                due_earliest_ms: parts[4].parse().map_err(|_| bad())?,
                vehicle_id: parts[5].clone(),
                axle_index: parts[6].parse().map_err(|_| bad())?,
                component: if parts[7] == "disc" { Component::Disc } else { Component::Friction },
            })
        };
        let fleet_id = r.fleet_id.clone();
        let first_page = after.is_none();
        let include_undated = r.include_undated && first_page;
        let now = now_ms();
        let (fleet, cursors, parts, undated) = self
            .state
            .blocking(move |store| {
                let fleet = known_fleet(store, &fleet_id)?;
                let cursors = scan_due_filtered(store, &fleet_id, level, due_before_ms, after, component, limit + 1)?;
                let page = &cursors[..cursors.len().min(limit)];
                let parts = due_parts(store, &fleet_id, page, level.probability(), fleet_zone(&fleet), now)?;
                let undated = if include_undated { undated_parts(store, &fleet_id, component)? } else { Vec::new() };
                Ok((fleet, cursors, parts, undated))
            })
            .await?;
        let next_page_token = if cursors.len() > limit {
            let last = &cursors[limit - 1];
            let component_text = component_code(Some(last.component));
            encode_token(&[
                &request_key[0], &request_key[1], &request_key[2], &request_key[3],
                &last.due_earliest_ms.to_string(), &last.vehicle_id, &last.axle_index.to_string(), component_text,
            ])
        } else {
            String::new()
        };
        Ok(Response::new(pb::ListDueResponse { parts, next_page_token, time_zone: fleet.time_zone, undated }))
    }

    async fn watch_due(&self, request: Request<pb::WatchDueRequest>) -> Result<Response<Self::WatchDueStream>, Status> {
        let caller = Caller::of(&request)?;
        let r = request.into_inner();
        caller.require(&r.fleet_id, Permission::ReadFleet)?;
        check_id("fleet_id", &r.fleet_id).map_err(|v| ServiceError::InvalidArgument(vec![v]))?;
        let due_before_ms = required_time("due_before", r.due_before.as_ref())?;
        let level = indexed_band_level("band_level", r.band_level)?;
        let stream = due_watch::start(self.state.clone(), r.fleet_id, due_before_ms, level).await?;
        Ok(Response::new(Box::pin(stream)))
    }

    async fn get_wear_trajectory(&self, request: Request<pb::GetWearTrajectoryRequest>) -> Result<Response<pb::GetWearTrajectoryResponse>, Status> {
        let caller = Caller::of(&request)?;
        let r = request.into_inner();
        caller.require(&r.fleet_id, Permission::ReadFleet)?;
        require_ids(&[("fleet_id", &r.fleet_id), ("vehicle_id", &r.vehicle_id)])?;
        let component = component_from_wire("component", r.component).map_err(|v| ServiceError::InvalidArgument(vec![v]))?;
        let level = band_level("band_level", r.band_level)?;
        let config = self.state.forecast.clone();
        let now = now_ms();
        let (fleet_id, vehicle_id, axle_index) = (r.fleet_id.clone(), r.vehicle_id.clone(), r.axle_index);
        let (fleet, data, parts) = self
            .state
            .blocking(move |store| {
                let (data, parts) = vehicle_forecast_now(store, &fleet_id, &vehicle_id, &config, level, now)?;
                Ok((known_fleet(store, &fleet_id)?, data, parts))
            })
            .await?;
        let zone = fleet_zone(&fleet);
        let Some(position) = parts.iter().position(|p| p.input.history.axle_index == axle_index && p.input.history.component == component) else {
            return Err(ServiceError::NotFound(format!("vehicle '{}' has no axle {axle_index}", r.vehicle_id)).into());
        };
        let part = &parts[position];
        let record = materialise(&data, std::slice::from_ref(part), now);
        let replacements_ms: Vec<i64> = data
            .history
            .replacements
            .iter()
            .filter(|x| x.axle_index == axle_index && x.component == component)
            .map(|x| x.replaced_at_ms)
            .collect();
        let fitted_at_ms = replacements_ms.iter().copied().max();
        // Energy at the start of an instant's UTC day, from the part's daily series (MJ).
        let energy_before = |ms: i64| {
            let days = (ms.div_euclid(MS_PER_DAY) - part.input.first_day).clamp(0, part.input.daily_energy_mj.len() as i64) as usize;
            part.input.daily_energy_mj[..days].iter().sum::<f64>()
        };
        let inspections: Vec<_> =
            data.history.inspections.iter().filter(|i| i.axle_index == axle_index && i.component == component).collect();
        let cycles = readings_by_cycle(&inspections.iter().map(|i| i.measured_at_ms).collect::<Vec<_>>(), &replacements_ms);
        // Each cycle's energy origin: its fitting, else its first reading (inspections are
        // oldest first).
        let mut origins_mj = std::collections::HashMap::new();
        for (inspection, cycle) in inspections.iter().zip(&cycles) {
            origins_mj.entry(cycle.cycles_ago).or_insert_with(|| energy_before(cycle.fitted_at_ms.unwrap_or(inspection.measured_at_ms)));
        }
        let (mut measured, mut earlier) = (Vec::new(), Vec::new());
        for (inspection, cycle) in inspections.iter().zip(&cycles) {
            let point = pb::MeasuredPoint {
                measured_at: Some(ms_timestamp(inspection.measured_at_ms)),
                thickness_mm: inspection.thickness_mm,
                energy_since_fitted_mj: energy_before(inspection.measured_at_ms) - origins_mj.get(&cycle.cycles_ago).copied().unwrap_or(0.0),
                inspection_id: inspection.inspection_id.clone(),
                cycles_ago: cycle.cycles_ago,
            };
            if cycle.cycles_ago == 0 { measured.push(point) } else { earlier.push(point) }
        }
        let forecast = part
            .outlook
            .trajectory
            .iter()
            .map(|t| {
                let ms = days_to_ms(t.day);
                pb::TrajectoryPoint {
                    date: Some(ms_timestamp(ms)),
                    calendar_date: local_date(ms, zone),
                    median_mm: t.median_mm,
                    low_mm: t.low_mm,
                    high_mm: t.high_mm,
                }
            })
            .collect();
        Ok(Response::new(pb::GetWearTrajectoryResponse {
            part: record.parts.first().map(|p| part_forecast(p, level, level, zone, now)),
            measured,
            forecast,
            fitted_at: fitted_at_ms.map(ms_timestamp),
            earlier,
        }))
    }

    async fn plan_visits(&self, request: Request<pb::PlanVisitsRequest>) -> Result<Response<pb::PlanVisitsResponse>, Status> {
        let caller = Caller::of(&request)?;
        let r = request.into_inner();
        caller.require(&r.fleet_id, Permission::ReadFleet)?;
        let mut violations = Vec::new();
        if let Err(v) = check_id("fleet_id", &r.fleet_id) {
            violations.push(v);
        }
        let from_ms = crate::convert::required_time_ms("from", r.from.as_ref()).map_err(|v| violations.push(v)).ok();
        let to_ms = crate::convert::required_time_ms("to", r.to.as_ref()).map_err(|v| violations.push(v)).ok();
        if !(r.capacity_hours_per_day.is_finite() && r.capacity_hours_per_day > 0.0 && r.capacity_hours_per_day <= 24.0 * 50.0) {
            violations.push(brakeledger_models::domain::FieldViolation::new("capacity_hours_per_day", "must be a number of hours greater than 0"));
        }
        for (field, value) in [("friction_job_hours", r.friction_job_hours), ("disc_job_hours", r.disc_job_hours)] {
            if !(value.is_finite() && value >= 0.0) {
                violations.push(brakeledger_models::domain::FieldViolation::new(field, "must be 0 (default) or a positive number of hours"));
            }
        }
        if let (Some(from), Some(to)) = (from_ms, to_ms) {
            if to < from {
                violations.push(brakeledger_models::domain::FieldViolation::new("to", "must not be before from"));
            } else if to - from > 366 * MS_PER_DAY {
                violations.push(brakeledger_models::domain::FieldViolation::new("to", "a plan covers at most 366 days"));
            }
        }
        if r.safety_margin_days.is_some_and(|days| days > 366) {
            violations.push(brakeledger_models::domain::FieldViolation::new("safety_margin_days", "must be at most 366 days"));
        }
        let level = match indexed_band_level("band_level", r.band_level) {
            Ok(level) => Some(level),
            Err(ServiceError::InvalidArgument(mut more)) => {
                violations.append(&mut more);
                None
            }
            Err(other) => return Err(other.into()),
        };
        let (Some(from_ms), Some(to_ms), Some(level), true) = (from_ms, to_ms, level, violations.is_empty()) else {
            return Err(ServiceError::InvalidArgument(violations).into());
        };
        let friction_hours = if r.friction_job_hours == 0.0 { 1.5 } else { r.friction_job_hours };
        let disc_hours = if r.disc_job_hours == 0.0 { 3.0 } else { r.disc_job_hours };
        let bundle_days = if r.bundle_within_days == 0 { 14 } else { i64::from(r.bundle_within_days.min(366)) };
        let margin_days = r.safety_margin_days.map_or(DEFAULT_SAFETY_MARGIN_DAYS, i64::from);
        let capacity = r.capacity_hours_per_day;
        let fleet_id = r.fleet_id.clone();
        let now = now_ms();
        let (fleet, parts) = self
            .state
            .blocking(move |store| {
                let fleet = known_fleet(store, &fleet_id)?;
                // Everything due before the plan ends (parts due now included), plus what
                // could join a bundle.
                let horizon_ms = to_ms.max(now) + (bundle_days + 2) * MS_PER_DAY;
                let cursors = scan_due_filtered(store, &fleet_id, level, horizon_ms, None, None, usize::MAX)?;
                let parts = due_parts(store, &fleet_id, &cursors, level.probability(), fleet_zone(&fleet), now)?;
                Ok((fleet, parts))
            })
            .await?;
        let zone = fleet_zone(&fleet);
        let job_hours = JobHours { friction: friction_hours, disc: disc_hours };
        let limits = PlanLimits {
            from_day: local_day_number(from_ms, zone),
            to_day: local_day_number(to_ms, zone),
            capacity_hours_per_day: capacity,
            bundle_within_days: bundle_days,
            safety_margin_days: margin_days,
        };
        let mut response = plan_for_due_parts(&parts, job_hours, &limits, zone);
        response.time_zone = fleet.time_zone;
        Ok(Response::new(response))
    }
}

/// The vehicle's materialised forecast when it can stand for a fresh one: the default band
/// level (the stored thickness bands are at 80 %), no write since it was computed (the vehicle
/// is not stale) and computed within `[forecast] materialised_max_age_s`. A fresh computation
/// runs the Monte Carlo (milliseconds per call); this is a few key reads.
fn materialised_forecast(
    store: &dyn Store,
    fleet_id: &str,
    vehicle_id: &str,
    config: &crate::config::ForecastConfig,
    level: f64,
    now_ms: i64,
) -> ServiceResult<Option<(FleetRecord, VehicleForecasts)>> {
    let max_age_ms = i64::try_from(config.materialised_max_age_s.saturating_mul(1000)).unwrap_or(i64::MAX);
    if max_age_ms == 0 || (level - crate::store::BandLevel::P80.probability()).abs() > 1e-12 || store.is_stale(fleet_id, vehicle_id)? {
        return Ok(None);
    }
    let Some(record) = store.get_forecasts(fleet_id, vehicle_id)? else { return Ok(None) };
    if now_ms.saturating_sub(record.computed_at_ms) > max_age_ms || record.computed_at_ms > now_ms {
        return Ok(None);
    }
    Ok(Some((known_fleet(store, fleet_id)?, record)))
}
