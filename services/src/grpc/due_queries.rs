//! Queries of a fleet's materialised forecasts shared by ListDue, WatchDue and PlanVisits (and
//! the fleet lookup GetFleet shares with them): the fleet itself (NOT_FOUND when it was never
//! set up and holds no vehicle), filtered range scans of the due index, the `DuePart` messages
//! of index entries, and the parts that cannot be forecast at all.
//!
//! # Nothing due never hides "cannot tell"
//! A part at or below its minimum is due now (every due quantile is the instant its forecast
//! was computed), so the due index holds it like any other dated part and every window ending
//! after that instant lists it. A part with no due date has no index entry; [`undated_parts`]
//! finds those by reading the fleet's stored forecasts, plus every registered vehicle whose
//! forecast has not been computed yet.

use std::collections::{BTreeSet, HashMap};

use brakeledger_models::domain::Component;
use brakeledger_proto::v1 as pb;

use crate::convert::component_to_wire;
use crate::error::{ServiceError, ServiceResult};
use crate::grpc::forecast_views::{part_forecast, STORED_THICKNESS_LEVEL};
use crate::store::{BandLevel, DueCursor, FleetRecord, Store, StoredPart, VehicleForecasts};

/// A fleet's settings: the stored ones, the defaults when it was never set up but holds
/// vehicles, NOT_FOUND when it was never set up and holds no vehicle (most often a typo).
pub fn known_fleet(store: &dyn Store, fleet_id: &str) -> ServiceResult<FleetRecord> {
    if let Some(fleet) = store.get_fleet(fleet_id)? {
        return Ok(fleet);
    }
    if store.list_vehicles(fleet_id, None, 1)?.is_empty() {
        return Err(ServiceError::NotFound(format!("fleet '{fleet_id}' was never set up and holds no vehicle")));
    }
    Ok(FleetRecord::default_for(fleet_id))
}

/// Reads due-index entries in order until `wanted` match the component filter or the range
/// ends (parts due now included: their entries sit at the instant they were computed).
pub fn scan_due_filtered(
    store: &dyn Store,
    fleet_id: &str,
    level: BandLevel,
    due_before_ms: i64,
    mut after: Option<DueCursor>,
    component: Option<Component>,
    wanted: usize,
) -> ServiceResult<Vec<DueCursor>> {
    let mut found = Vec::new();
    let chunk = wanted.clamp(16, 4096);
    loop {
        let cursors = store.scan_due(fleet_id, level, due_before_ms, after.as_ref(), chunk)?;
        let exhausted = cursors.len() < chunk;
        after = cursors.last().cloned();
        found.extend(cursors.into_iter().filter(|c| component.is_none_or(|wanted| c.component == wanted)));
        if found.len() >= wanted || exhausted {
            found.truncate(wanted);
            return Ok(found);
        }
    }
}

/// The `DuePart` messages of index entries, reading the forecasts of their vehicles in one
/// store call ([`Store::get_many_forecasts`]).
pub fn due_parts(store: &dyn Store, fleet_id: &str, cursors: &[DueCursor], level: f64, zone: chrono_tz::Tz, now_ms: i64) -> ServiceResult<Vec<pb::DuePart>> {
    let mut wanted: Vec<&str> = cursors.iter().map(|c| c.vehicle_id.as_str()).collect();
    wanted.sort_unstable();
    wanted.dedup();
    let vehicles: HashMap<String, VehicleForecasts> =
        store.get_many_forecasts(fleet_id, &wanted)?.into_iter().map(|f| (f.vehicle_id.clone(), f)).collect();
    let mut parts = Vec::with_capacity(cursors.len());
    for cursor in cursors {
        let Some(record) = vehicles.get(&cursor.vehicle_id) else { continue };
        if let Some(part) = record.parts.iter().find(|p| p.axle_index == cursor.axle_index && p.component == cursor.component) {
            parts.push(due_part(record, part, level, zone, now_ms));
        }
    }
    Ok(parts)
}

/// One `DuePart` of a vehicle's materialised forecasts.
pub fn due_part(record: &VehicleForecasts, part: &StoredPart, level: f64, zone: chrono_tz::Tz, now_ms: i64) -> pb::DuePart {
    pb::DuePart {
        fleet_id: record.fleet_id.clone(),
        vehicle_id: record.vehicle_id.clone(),
        vehicle_class: record.vehicle_class.clone(),
        part: Some(part_forecast(part, level, STORED_THICKNESS_LEVEL, zone, now_ms)),
    }
}

/// Why a stored part has no due date, from its notes.
fn undated_reason(part: &StoredPart) -> String {
    if part.outlook.notes.is_empty() {
        "no due date can be given from the data held".to_owned()
    } else {
        part.outlook.notes.join("; ")
    }
}

/// Every part of a fleet that has no due date (only `component`, when given), by vehicle,
/// axle and component: parts whose stored forecast has no due distribution, and every part
/// of a registered vehicle whose forecast has not been computed yet (`pending`). Reads every
/// stored forecast (one at a time) and vehicle of the fleet.
pub fn undated_parts(store: &dyn Store, fleet_id: &str, component: Option<Component>) -> ServiceResult<Vec<pb::UndatedPart>> {
    let wanted = |c: Component| component.is_none_or(|w| w == c);
    let mut undated = Vec::new();
    // The fleet's forecasts one at a time (a large fleet's do not fit in memory at once).
    let mut computed: BTreeSet<String> = BTreeSet::new();
    store.visit_fleet_forecasts(fleet_id, &mut |record| {
        for part in record.parts.iter().filter(|p| p.outlook.due.is_none() && wanted(p.component)) {
            undated.push(pb::UndatedPart {
                fleet_id: record.fleet_id.clone(),
                vehicle_id: record.vehicle_id.clone(),
                vehicle_class: record.vehicle_class.clone(),
                axle_index: part.axle_index,
                component: component_to_wire(part.component) as i32,
                reason: undated_reason(part),
                pending: false,
            });
        }
        computed.insert(record.vehicle_id);
        Ok(())
    })?;
    let mut after: Option<String> = None;
    loop {
        let page = store.list_vehicles(fleet_id, after.as_deref(), 1000)?;
        for vehicle in page.iter().filter(|v| !computed.contains(v.vehicle_id.as_str())) {
            for axle in &vehicle.spec.axles {
                for c in Component::ALL.into_iter().filter(|c| wanted(*c)) {
                    undated.push(pb::UndatedPart {
                        fleet_id: vehicle.fleet_id.clone(),
                        vehicle_id: vehicle.vehicle_id.clone(),
                        vehicle_class: vehicle.spec.vehicle_class.clone(),
                        axle_index: axle.axle_index,
                        component: component_to_wire(c) as i32,
                        reason: "the forecast has not been computed yet; ask again shortly".to_owned(),
                        pending: true,
                    });
                }
            }
        }
        match page.last() {
            Some(last) if page.len() == 1000 => after = Some(last.vehicle_id.clone()),
            _ => break,
        }
    }
    undated.sort_by(|a, b| (&a.vehicle_id, a.axle_index, a.component).cmp(&(&b.vehicle_id, b.axle_index, b.component)));
    Ok(undated)
}
