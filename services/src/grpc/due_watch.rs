//! WatchDue streams: the current due list, then an event whenever a part enters or leaves the
//! window or its median due date moves by more than a day.
//!
//! Each stream keeps its own view of which parts are in its window (with their median dates)
//! and diffs every forecast change of its fleet against that view. If the stream falls behind
//! the change feed, it re-reads the stored forecasts of every vehicle it knows or that is in
//! the window now and diffs those, so no entry or exit is ever missed.

use std::collections::{BTreeMap, BTreeSet};

use brakeledger_proto::v1 as pb;
use tokio::sync::{broadcast, mpsc};
use tokio_stream::wrappers::ReceiverStream;
use tonic::Status;

use crate::error::ServiceResult;
use crate::grpc::due_queries::{due_part, due_parts, known_fleet, scan_due_filtered};
use crate::grpc::forecast_views::fleet_zone;
use crate::state::AppState;
use crate::store::{BandLevel, StoredPart, VehicleForecasts, MS_PER_DAY};
use brakeledger_models::domain::Component;

/// A part's identity within a fleet.
type PartKey = (String, u32, Component);

/// What the stream has told its client: parts in the window and their median due day.
#[derive(Default)]
struct WindowView {
    parts: BTreeMap<PartKey, f64>,
}

struct Window {
    fleet_id: String,
    due_before_ms: i64,
    level: BandLevel,
    zone: chrono_tz::Tz,
}

impl Window {
    fn contains(&self, part: &StoredPart) -> bool {
        part.due_earliest_ms(self.level.probability()).is_some_and(|ms| ms < self.due_before_ms)
    }
}

fn event(change: pb::DueChange, part: Option<pb::DuePart>) -> pb::WatchDueEvent {
    pb::WatchDueEvent { change: change as i32, part }
}

/// Diffs one vehicle's forecasts (`None`: no forecasts any more) against the view.
fn diff_vehicle(view: &mut WindowView, window: &Window, vehicle_id: &str, record: Option<&VehicleForecasts>) -> Vec<pb::WatchDueEvent> {
    let mut events = Vec::new();
    let mut present = BTreeSet::new();
    if let Some(record) = record {
        for part in &record.parts {
            let key = (vehicle_id.to_owned(), part.axle_index, part.component);
            present.insert(key.clone());
            let median = part.due_band_days(window.level.probability()).map(|b| b.1);
            let inside = window.contains(part);
            let message = || Some(due_part(record, part, window.level.probability(), window.zone, crate::convert::now_ms()));
            match (view.parts.get(&key).copied(), inside, median) {
                (None, true, Some(m)) => {
                    view.parts.insert(key, m);
                    events.push(event(pb::DueChange::Entered, message()));
                }
                (Some(old), true, Some(m)) => {
                    if (m - old).abs() > 1.0 {
                        view.parts.insert(key, m);
                        events.push(event(pb::DueChange::Moved, message()));
                    }
                }
                (Some(_), _, _) => {
                    view.parts.remove(&key);
                    events.push(event(pb::DueChange::Left, message()));
                }
                (None, _, _) => {}
            }
        }
    }
    let gone: Vec<PartKey> = view.parts.keys().filter(|k| k.0 == vehicle_id && !present.contains(*k)).cloned().collect();
    for key in gone {
        view.parts.remove(&key);
        events.push(event(
            pb::DueChange::Left,
            Some(pb::DuePart { fleet_id: window.fleet_id.clone(), vehicle_id: key.0.clone(), vehicle_class: String::new(), part: None }),
        ));
    }
    events
}

/// Starts a watch: subscribes to changes first, then reads the snapshot, so nothing between
/// the two is missed.
pub async fn start(state: AppState, fleet_id: String, due_before_ms: i64, level: BandLevel) -> ServiceResult<ReceiverStream<Result<pb::WatchDueEvent, Status>>> {
    let mut changes = state.changes.subscribe();
    let mut stopping = state.stopping.subscribe();
    let fleet = fleet_id.clone();
    let (zone, snapshot) = state
        .blocking(move |store| {
            let zone = fleet_zone(&known_fleet(store, &fleet)?);
            let cursors = scan_due_filtered(store, &fleet, level, due_before_ms, None, None, usize::MAX)?;
            Ok((zone, due_parts(store, &fleet, &cursors, level.probability(), zone, crate::convert::now_ms())?))
        })
        .await?;
    let window = Window { fleet_id, due_before_ms, level, zone };
    let mut view = WindowView::default();
    let (sender, receiver) = mpsc::channel(256);
    tokio::spawn(async move {
        for part in snapshot {
            if let Some(p) = &part.part {
                let median = p.due_median.as_ref().and_then(crate::convert::timestamp_ms).map(|ms| ms as f64 / MS_PER_DAY as f64);
                let component = crate::convert::component_from_wire("component", p.component).unwrap_or(Component::Friction);
                view.parts.insert((part.vehicle_id.clone(), p.axle_index, component), median.unwrap_or(f64::NAN));
            }
            if sender.send(Ok(event(pb::DueChange::Current, Some(part)))).await.is_err() {
                return;
            }
        }
        if sender.send(Ok(event(pb::DueChange::SnapshotDone, None))).await.is_err() {
            return;
        }
        loop {
            let events = tokio::select! {
                _ = sender.closed() => return,
                _ = async { let _ = stopping.wait_for(|s| *s).await; } => {
                    // Ending with OK would tell the client the watch is over; UNAVAILABLE
                    // tells it to reconnect.
                    let status = crate::error::ServiceError::ShuttingDown("the server is shutting down; watch again to reconnect".into());
                    let _ = sender.send(Err(status.into_status())).await;
                    return;
                }
                received = changes.recv() => match received {
                    Ok(change) if change.after.fleet_id == window.fleet_id => {
                        diff_vehicle(&mut view, &window, &change.after.vehicle_id, Some(&change.after))
                    }
                    Ok(_) => continue,
                    Err(broadcast::error::RecvError::Lagged(_)) => match resync(&state, &mut view, &window).await {
                        Ok(events) => events,
                        Err(error) => {
                            let _ = sender.send(Err(error.into_status())).await;
                            return;
                        }
                    },
                    Err(broadcast::error::RecvError::Closed) => return,
                },
            };
            for e in events {
                if sender.send(Ok(e)).await.is_err() {
                    return;
                }
            }
        }
    });
    Ok(ReceiverStream::new(receiver))
}

/// After falling behind: re-reads every vehicle known to the view or in the window now.
async fn resync(state: &AppState, view: &mut WindowView, window: &Window) -> ServiceResult<Vec<pb::WatchDueEvent>> {
    let known: BTreeSet<String> = view.parts.keys().map(|k| k.0.clone()).collect();
    let (fleet, level, due_before) = (window.fleet_id.clone(), window.level, window.due_before_ms);
    let records = state
        .blocking(move |store| {
            let mut vehicles = known;
            for cursor in scan_due_filtered(store, &fleet, level, due_before, None, None, usize::MAX)? {
                vehicles.insert(cursor.vehicle_id);
            }
            vehicles
                .into_iter()
                .map(|v| Ok((store.get_forecasts(&fleet, &v)?, v)))
                .collect::<ServiceResult<Vec<_>>>()
        })
        .await?;
    let mut events = Vec::new();
    for (record, vehicle_id) in records {
        events.extend(diff_vehicle(view, window, &vehicle_id, record.as_ref()));
    }
    Ok(events)
}
