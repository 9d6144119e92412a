//! The demo's integration: sends a simulated fleet through the public gRPC API the way a
//! fleet's systems would: the fleet and its time zone (UpsertFleet), each vehicle
//! (UpsertVehicle), every trip on streams (StreamTrips), then the workshop's replacements and
//! inspections (RecordReplacement, RecordInspection), and waits until every forecast is
//! up to date (GetFleet's `forecasts_pending`).

use std::time::{Duration, Instant};

use brakeledger_models::simulator::{SimTrip, SimVehicle, SimulatedFleet};
use brakeledger_proto::v1 as pb;
use futures::StreamExt;

use crate::cli::client::{explain, Connection};
use crate::convert::component_to_wire;

/// Unary calls in flight at once while sending workshop records.
const CALLS_IN_FLIGHT: usize = 32;
/// Trip streams sent side by side.
const TRIP_STREAMS: usize = 2;

/// What the feed sent and what the server made of it.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct FeedCounts {
    /// Vehicles registered.
    pub vehicles: usize,
    /// Trips sent.
    pub trips_sent: u64,
    /// Trips stored.
    pub trips_accepted: u64,
    /// Trips refused (with the first few reasons in `refusals`).
    pub trips_rejected: u64,
    /// Inspections stored.
    pub inspections: usize,
    /// Replacements stored.
    pub replacements: usize,
    /// Workshop records (inspections and replacements) the server refused as invalid.
    pub records_rejected: usize,
    /// The first few refusals, in plain words.
    pub refusals: Vec<String>,
}

impl FeedCounts {
    /// Counts one workshop record's answer: `Ok(true)` when stored, `Ok(false)` when refused
    /// as invalid (an integration logs those and goes on), an error for anything else.
    fn take(&mut self, id: &str, result: Result<(), tonic::Status>) -> anyhow::Result<bool> {
        match result {
            Ok(()) => Ok(true),
            Err(status) if status.code() == tonic::Code::InvalidArgument => {
                self.records_rejected += 1;
                if self.refusals.len() < 10 {
                    self.refusals.push(format!("{id}: {}", status.message()));
                }
                Ok(false)
            }
            Err(status) => Err(explain(status, &format!("recording {id}"))),
        }
    }
}

/// The wire form of a simulated vehicle.
pub fn vehicle_message(fleet_id: &str, vehicle: &SimVehicle) -> pb::Vehicle {
    crate::store::VehicleRecord {
        fleet_id: fleet_id.to_owned(),
        vehicle_id: vehicle.vehicle_id.clone(),
        vin: vehicle.vin.clone(),
        spec: vehicle.spec.clone(),
    }
    .into()
}

/// A protobuf timestamp from seconds since the Unix epoch (fractional).
fn unix_timestamp(unix_s: f64) -> prost_types::Timestamp {
    let seconds = unix_s.floor();
    prost_types::Timestamp { seconds: seconds as i64, nanos: ((unix_s - seconds) * 1e9).round().min(999_999_999.0) as i32 }
}

/// The wire form of a simulated trip.
pub fn trip_message(fleet_id: &str, vehicle_id: &str, trip: &SimTrip) -> pb::TripSummary {
    pb::TripSummary {
        fleet_id: fleet_id.to_owned(),
        vehicle_id: vehicle_id.to_owned(),
        trip_id: trip.trip_id.clone(),
        start_time: Some(unix_timestamp(trip.start_unix_s)),
        end_time: Some(unix_timestamp(trip.end_unix_s)),
        distance_m: trip.distance_m,
        friction_energy_j: trip.friction_energy_j,
        axle_energy_j: trip.axle_energy_j.clone(),
        brake_applications: trip.brake_applications,
        regen_energy_j: None,
        hot_energy_j: Some(trip.hot_energy_j),
        retarder_energy_j: None,
    }
}

/// Sends the whole fleet; `progress` receives a line per stage.
pub async fn feed_fleet(
    connection: &mut Connection,
    fleet_id: &str,
    time_zone: &str,
    fleet: &SimulatedFleet,
    progress: &mut impl FnMut(String),
) -> anyhow::Result<FeedCounts> {
    let mut counts = FeedCounts::default();
    connection
        .fleet
        .upsert_fleet(pb::UpsertFleetRequest {
            fleet: Some(pb::Fleet { fleet_id: fleet_id.to_owned(), time_zone: time_zone.to_owned(), display_name: "Invented demo fleet".to_owned() }),
        })
        .await
        .map_err(|s| explain(s, "setting up the demo fleet"))?;
    for vehicle in &fleet.vehicles {
        connection
            .fleet
            .upsert_vehicle(pb::UpsertVehicleRequest { vehicle: Some(vehicle_message(fleet_id, vehicle)) })
            .await
            .map_err(|s| explain(s, &format!("registering {}", vehicle.vehicle_id)))?;
        counts.vehicles += 1;
    }
    progress(format!("registered {} vehicles", counts.vehicles));

    // Trips: the vehicles split between a few streams sent side by side, each vehicle's trips
    // in time order as a telematics gateway would forward them.
    let started = Instant::now();
    let mut streams: Vec<Vec<pb::TripSummary>> = vec![Vec::new(); TRIP_STREAMS];
    for (i, vehicle) in fleet.vehicles.iter().enumerate() {
        streams[i % TRIP_STREAMS].extend(vehicle.trips.iter().map(|t| trip_message(fleet_id, &vehicle.vehicle_id, t)));
    }
    counts.trips_sent = streams.iter().map(|s| s.len() as u64).sum();
    let sends = streams.into_iter().map(|trips| {
        let mut telemetry = connection.telemetry.clone();
        async move { telemetry.stream_trips(futures::stream::iter(trips)).await }
    });
    for result in futures::future::join_all(sends).await {
        let report = result.map_err(|s| explain(s, "streaming trips"))?.into_inner();
        counts.trips_accepted += report.accepted + report.duplicates;
        counts.trips_rejected += report.rejected_count.max(report.rejected.len() as u64);
        counts.refusals.extend(report.rejected.iter().take(5).map(|r| format!("trip {}: {}: {}", r.trip_id, r.field, r.reason)));
    }
    progress(format!(
        "streamed {} trips in {:.1} s: {} stored, {} refused",
        counts.trips_sent,
        started.elapsed().as_secs_f64(),
        counts.trips_accepted,
        counts.trips_rejected
    ));

    // Workshop records: replacements first, then inspections, many calls in flight.
    let started = Instant::now();
    let replacements = fleet.vehicles.iter().flat_map(|v| {
        v.replacements.iter().map(move |r| pb::RecordReplacementRequest {
            fleet_id: fleet_id.to_owned(),
            vehicle_id: v.vehicle_id.clone(),
            replacement_id: r.replacement_id.clone(),
            axle_index: r.axle_index,
            component: component_to_wire(r.component) as i32,
            new_thickness_mm: r.new_thickness_mm,
            replaced_at: Some(unix_timestamp(r.unix_s)),
        })
    });
    let maintenance = connection.maintenance.clone();
    let mut calls = futures::stream::iter(replacements)
        .map(|request| {
            let mut client = maintenance.clone();
            async move {
                let id = format!("replacement {} of {}", request.replacement_id, request.vehicle_id);
                (id, client.record_replacement(request).await.map(|_| ()))
            }
        })
        .buffer_unordered(CALLS_IN_FLIGHT);
    while let Some((id, result)) = calls.next().await {
        if counts.take(&id, result)? {
            counts.replacements += 1;
        }
    }
    let inspections = fleet.vehicles.iter().flat_map(|v| {
        v.inspections.iter().map(move |i| pb::RecordInspectionRequest {
            fleet_id: fleet_id.to_owned(),
            vehicle_id: v.vehicle_id.clone(),
            inspection_id: i.inspection_id.clone(),
            axle_index: i.axle_index,
            component: component_to_wire(i.component) as i32,
            thickness_mm: i.thickness_mm,
            measured_at: Some(unix_timestamp(i.unix_s)),
        })
    });
    let mut calls = futures::stream::iter(inspections)
        .map(|request| {
            let mut client = maintenance.clone();
            async move {
                let id = format!("inspection {} of {}", request.inspection_id, request.vehicle_id);
                (id, client.record_inspection(request).await.map(|_| ()))
            }
        })
        .buffer_unordered(CALLS_IN_FLIGHT);
    while let Some((id, result)) = calls.next().await {
        if counts.take(&id, result)? {
            counts.inspections += 1;
        }
    }
    progress(format!(
        "recorded {} replacements and {} inspections in {:.1} s ({} refused)",
        counts.replacements,
        counts.inspections,
        started.elapsed().as_secs_f64(),
        counts.records_rejected
    ));
    Ok(counts)
}

/// Polls GetFleet until no forecast is waiting to be recomputed, or fails after `limit`.
pub async fn wait_for_forecasts(connection: &mut Connection, fleet_id: &str, limit: Duration) -> anyhow::Result<Duration> {
    let started = Instant::now();
    loop {
        let fleet = connection
            .fleet
            .get_fleet(pb::GetFleetRequest { fleet_id: fleet_id.to_owned() })
            .await
            .map_err(|s| explain(s, "reading the fleet"))?
            .into_inner();
        if fleet.forecasts_pending == 0 {
            return Ok(started.elapsed());
        }
        if started.elapsed() > limit {
            anyhow::bail!(
                "{} vehicles still wait for their forecasts after {} s; the server is slower than expected",
                fleet.forecasts_pending,
                limit.as_secs()
            );
        }
        tokio::time::sleep(Duration::from_millis(200)).await;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn fractional_seconds_become_timestamps() {
        let ts = unix_timestamp(1_700_000_000.25);
        assert_eq!((ts.seconds, ts.nanos), (1_700_000_000, 250_000_000));
        let ts = unix_timestamp(1_700_000_000.999_999_999_9);
        assert!(ts.nanos <= 999_999_999);
    }
}
