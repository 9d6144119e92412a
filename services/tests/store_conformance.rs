//! One conformance suite for every storage engine: the same test functions run against the
//! embedded sled engine and against PostgreSQL (`conformance!` at the bottom makes one
//! `#[test]` per engine and function).
//!
//! PostgreSQL is found through `BRAKELEDGER_TEST_POSTGRES_URL`, a URL of a server on which
//! the tests may create and drop databases (each test gets a database of its own), e.g.
//!
//! ```sh
//! BRAKELEDGER_TEST_POSTGRES_URL=postgres://postgres@127.0.0.1:5432/postgres \
//!   cargo test --release -p brakeledger --test store_conformance
//! ```
//!
//! Without it the PostgreSQL half prints how to run it and passes, unless
//! `BRAKELEDGER_REQUIRE_POSTGRES=1` (as `.ci/run` sets), when it fails. All data is invented.

#![allow(clippy::unwrap_used)]

use std::sync::Arc;

use brakeledger::auth::roles::Role;
use brakeledger::store::postgres::scratch::ScratchDatabase;
use brakeledger::store::postgres::PostgresStore;
use brakeledger::store::sled_store::SledStore;
use brakeledger::store::*;
use brakeledger_models::domain::{AxleBrake, BrakeType, Component, VehicleSpec};
use brakeledger_models::{DueDistribution, ForecastBasis, PartOutlook, WearPrior};

// ---------------------------------------------------------------------------------------------
// Engines

/// An engine under test: a store, and a way to open a second handle on the same database (a
/// second replica for PostgreSQL; the same store for the embedded engine, which one process owns).
struct Engine {
    store: Arc<dyn Store>,
    second: Box<dyn Fn() -> Arc<dyn Store>>,
    /// Reopens the database after its schema version was set to `version`.
    reopen_with_version: Box<dyn Fn(u32) -> StoreResult<()>>,
    _database: Option<ScratchDatabase>,
}

fn sled_engine() -> Option<Engine> {
    let dir = Arc::new(tempfile::tempdir().unwrap());
    let store: Arc<dyn Store> = Arc::new(SledStore::open(dir.path()).unwrap());
    let second = Arc::clone(&store);
    Some(Engine {
        store,
        second: Box::new(move || Arc::clone(&second)),
        reopen_with_version: Box::new(move |version| {
            let scratch = dir.path().join("versioned");
            SledStore::open(&scratch)?.force_schema_version(version)?;
            SledStore::open(&scratch).map(drop)
        }),
        _database: None,
    })
}

fn postgres_engine() -> Option<Engine> {
    let database = ScratchDatabase::for_test("brakeledger_test")?;
    let url = database.url.clone();
    let store: Arc<dyn Store> = Arc::new(PostgresStore::open(&url).unwrap());
    let (second_url, version_url) = (url.clone(), url);
    Some(Engine {
        store,
        second: Box::new(move || Arc::new(PostgresStore::open(&second_url).unwrap())),
        reopen_with_version: Box::new(move |version| {
            PostgresStore::open(&version_url)?.force_schema_version(version)?;
            PostgresStore::open(&version_url).map(drop)
        }),
        _database: Some(database),
    })
}

// ---------------------------------------------------------------------------------------------
// Invented records

fn spec() -> VehicleSpec {
    VehicleSpec {
        vehicle_class: "city-bus".into(),
        mass_kg: 14_500.0,
        axles: vec![
            AxleBrake { axle_index: 1, brake_type: BrakeType::Disc, energy_share: 0.62, friction_new_mm: 22.0, friction_min_mm: 3.0, disc_new_mm: 45.0, disc_min_mm: 39.0 },
            AxleBrake { axle_index: 2, brake_type: BrakeType::Drum, energy_share: 0.38, friction_new_mm: 18.0, friction_min_mm: 5.0, disc_new_mm: 16.0, disc_min_mm: 12.0 },
        ],
    }
}

fn vehicle(fleet: &str, id: &str) -> VehicleRecord {
    VehicleRecord { fleet_id: fleet.into(), vehicle_id: id.into(), vin: Some(format!("VIN-{id}")), spec: spec() }
}

fn trip(fleet: &str, vehicle: &str, id: &str, end_ms: i64, energy_j: f64) -> TripRecord {
    TripRecord {
        fleet_id: fleet.into(),
        vehicle_id: vehicle.into(),
        trip_id: id.into(),
        start_ms: end_ms - 3_600_000,
        end_ms,
        distance_m: 40_000.0,
        friction_energy_j: energy_j,
        axle_energy_j: vec![energy_j * 0.62, energy_j * 0.38],
        axle_split_reported: false,
        brake_applications: 300,
        regen_energy_j: Some(1.5e6),
        hot_energy_j: energy_j * 0.25,
    }
}

fn inspection(vehicle: &str, id: &str, thickness_mm: f64, at_ms: i64) -> InspectionRecord {
    InspectionRecord {
        fleet_id: "north".into(),
        vehicle_id: vehicle.into(),
        inspection_id: id.into(),
        axle_index: 1,
        component: Component::Friction,
        thickness_mm,
        measured_at_ms: at_ms,
    }
}

fn replacement(vehicle: &str, id: &str, at_ms: i64) -> ReplacementRecord {
    ReplacementRecord {
        fleet_id: "north".into(),
        vehicle_id: vehicle.into(),
        replacement_id: id.into(),
        axle_index: 2,
        component: Component::Disc,
        new_thickness_mm: 16.0,
        replaced_at_ms: at_ms,
    }
}

/// A part whose due quantiles are `first_day`, `first_day + 1`, … (days since the epoch).
fn part(axle_index: u32, component: Component, first_day: f64) -> StoredPart {
    StoredPart {
        axle_index,
        component,
        own_fit: None,
        outlook: PartOutlook {
            current_thickness_mm: 10.0,
            current_thickness_low_mm: 9.5,
            current_thickness_high_mm: 10.5,
            min_thickness_mm: 3.0,
            wear_rate_mm_per_mj: 0.002,
            wear_rate_stderr_mm_per_mj: 0.0004,
            daily_energy_mj: 40.0,
            due: Some(DueDistribution { quantile_days: (0..99).map(|i| first_day + f64::from(i)).collect() }),
            due_now: false,
            basis: ForecastBasis::Combined,
            inspections_used: 4,
            notes: vec![],
            fitted_day: Some(19_000.0),
            energy_since_fitted_mj: 1200.0,
            trajectory: vec![],
        },
    }
}

fn forecasts(vehicle: &str, parts: Vec<StoredPart>) -> VehicleForecasts {
    VehicleForecasts { fleet_id: "north".into(), vehicle_id: vehicle.into(), vehicle_class: "city-bus".into(), computed_at_ms: 1_700_000_000_000, parts }
}

const DAY: i64 = MS_PER_DAY;
const T0: i64 = 20_000 * DAY; // 2024-10-05, an invented date

// ---------------------------------------------------------------------------------------------
// The suite

fn fleets_and_vehicles(engine: &Engine) {
    let store = &engine.store;
    assert!(store.upsert_fleet(&FleetRecord { fleet_id: "north".into(), time_zone: "Europe/Lisbon".into(), display_name: "North".into() }).unwrap());
    assert!(!store.upsert_fleet(&FleetRecord { fleet_id: "north".into(), time_zone: "UTC".into(), display_name: "North depot".into() }).unwrap());
    assert_eq!(store.get_fleet("north").unwrap().unwrap().display_name, "North depot");
    assert_eq!(store.get_fleet("south").unwrap(), None);
    for id in ["v-03", "v-01", "v-02", "v-10"] {
        assert!(store.upsert_vehicle(&vehicle("north", id)).unwrap());
    }
    assert!(!store.upsert_vehicle(&vehicle("north", "v-01")).unwrap(), "a second upsert replaces");
    assert!(store.upsert_vehicle(&vehicle("west", "w-1")).unwrap());
    assert_eq!(store.list_fleet_ids().unwrap(), vec!["north".to_owned(), "west".to_owned()], "fleets set up and fleets holding vehicles");
    assert_eq!(store.count_vehicles("north").unwrap(), 4);
    let page: Vec<String> = store.list_vehicles("north", None, 2).unwrap().into_iter().map(|v| v.vehicle_id).collect();
    assert_eq!(page, ["v-01", "v-02"]);
    let next: Vec<String> = store.list_vehicles("north", Some("v-02"), 10).unwrap().into_iter().map(|v| v.vehicle_id).collect();
    assert_eq!(next, ["v-03", "v-10"]);
    assert_eq!(store.get_vehicle("north", "v-10").unwrap(), Some(vehicle("north", "v-10")));
    assert_eq!(store.get_vehicle("west", "v-10").unwrap(), None, "vehicles are fleet-scoped");
}

fn ingest_totals_and_daily_rollup(engine: &Engine) {
    let store = &engine.store;
    store.upsert_vehicle(&vehicle("north", "bus-1")).unwrap();
    let day1 = T0 + 8 * 3_600_000;
    let day2 = T0 + DAY + 8 * 3_600_000;
    let first = vec![trip("north", "bus-1", "a", day1, 80e6), trip("north", "bus-1", "b", day1 + 3_600_000, 20e6), trip("north", "bus-1", "a", day1, 80e6)];
    assert_eq!(store.ingest_trips(&first).unwrap(), [IngestOutcome::Stored, IngestOutcome::Stored, IngestOutcome::Duplicate], "repeated within a batch");
    let second = vec![trip("north", "bus-1", "b", day1 + 3_600_000, 20e6), trip("north", "bus-1", "c", day2, 50e6)];
    assert_eq!(store.ingest_trips(&second).unwrap(), [IngestOutcome::Duplicate, IngestOutcome::Stored], "repeated across batches");
    assert_eq!(store.ingest_trips(&[]).unwrap(), []);

    let totals = store.vehicle_totals("north", "bus-1").unwrap();
    assert_eq!(totals.trips_recorded, 3);
    assert_eq!(totals.friction_energy_j, 150e6);
    assert_eq!(totals.distance_m, 120_000.0);
    assert_eq!(totals.last_trip_end_ms, Some(day2));
    assert_eq!(store.vehicle_totals("north", "nobody").unwrap(), VehicleTotals::default());

    let daily = store.daily_energy("north", "bus-1").unwrap();
    assert_eq!(daily.iter().map(|d| d.day).collect::<Vec<_>>(), [utc_day(day1), utc_day(day2)]);
    assert_eq!(daily[0].trips, 2);
    assert_eq!(daily[0].distance_m, 80_000.0);
    assert!((daily[0].axle_energy_j[0] - 100e6 * 0.62).abs() < 1e-3);
    assert!((daily[0].axle_energy_j[1] - 100e6 * 0.38).abs() < 1e-3);
    assert!((daily[0].axle_hot_energy_j[0] - 100e6 * 0.62 * 0.25).abs() < 1e-3, "hot energy split by the trip's hot share");
    assert_eq!(daily[1].trips, 1);
    assert!(store.stale_vehicles(100).unwrap().iter().any(|m| m.vehicle_id == "bus-1"), "ingest marks the vehicle stale");
}

fn duplicates_from_two_concurrent_writers(engine: &Engine) {
    let (one, two) = (Arc::clone(&engine.store), (engine.second)());
    one.upsert_vehicle(&vehicle("north", "bus-1")).unwrap();
    one.upsert_vehicle(&vehicle("north", "bus-2")).unwrap();
    // The same 200 trips (two vehicles), sent through both handles at once in batches of 20,
    // one in order and one reversed, so the writers meet on the same rows.
    let trips: Vec<TripRecord> = (0..200).map(|i| trip("north", if i % 2 == 0 { "bus-1" } else { "bus-2" }, &format!("t{i:03}"), T0 + i * 60_000, 1e6)).collect();
    let batches: Vec<Vec<TripRecord>> = trips.chunks(20).map(<[TripRecord]>::to_vec).collect();
    let writer = |store: Arc<dyn Store>, batches: Vec<Vec<TripRecord>>| {
        std::thread::spawn(move || batches.iter().map(|b| store.ingest_trips(b).unwrap().iter().filter(|o| **o == IngestOutcome::Stored).count()).sum::<usize>())
    };
    let reversed: Vec<Vec<TripRecord>> = batches.iter().rev().cloned().collect();
    let (a, b) = (writer(one.clone(), batches), writer(two, reversed));
    let stored = a.join().unwrap() + b.join().unwrap();
    assert_eq!(stored, 200, "each trip is stored exactly once between the two writers");
    let totals = [one.vehicle_totals("north", "bus-1").unwrap(), one.vehicle_totals("north", "bus-2").unwrap()];
    assert_eq!(totals[0].trips_recorded + totals[1].trips_recorded, 200);
    assert_eq!(totals[0].friction_energy_j, 100e6, "totals count each trip once");
    let rolled: u32 = one.daily_energy("north", "bus-1").unwrap().iter().map(|d| d.trips).sum();
    assert_eq!(rolled, 100, "the roll-up counts each trip once");

    // The same inspection from both writers at once: one Stored, one Duplicate.
    let record = inspection("bus-1", "ins-1", 12.5, T0);
    let (x, y) = (Arc::clone(&one), (engine.second)());
    let (r1, r2) = (record.clone(), record.clone());
    let h1 = std::thread::spawn(move || x.record_inspection(&r1).unwrap());
    let h2 = std::thread::spawn(move || y.record_inspection(&r2).unwrap());
    let mut outcomes = [h1.join().unwrap(), h2.join().unwrap()];
    outcomes.sort_by_key(|o| matches!(o, InsertOutcome::Duplicate));
    assert_eq!(outcomes, [InsertOutcome::Stored, InsertOutcome::Duplicate]);
}

fn a_batch_prepared_before_another_write_is_stored_as_if_prepared_after(engine: &Engine) {
    let store = &engine.store;
    store.upsert_vehicle(&vehicle("north", "bus-1")).unwrap();
    store.upsert_vehicle(&vehicle("north", "bus-2")).unwrap();
    let at = |i: i64| T0 + i * 3_600_000;
    // Prepared first, written last: "b" and "c" of bus-1 reach the store in between (as the
    // previous chunk of a call does while the next one is prepared); bus-2 is untouched.
    let later = vec![
        trip("north", "bus-1", "a", at(1), 1e6),
        trip("north", "bus-1", "b", at(2), 1e6),
        trip("north", "bus-2", "x", at(3), 1e6),
        trip("north", "bus-1", "a", at(1), 1e6),
    ];
    let prepared = store.prepare_trips(later.clone()).unwrap();
    let between = vec![trip("north", "bus-1", "b", at(2), 1e6), trip("north", "bus-1", "c", at(30), 1e6)];
    assert_eq!(store.ingest_trips(&between).unwrap(), [IngestOutcome::Stored, IngestOutcome::Stored]);
    assert_eq!(
        store.ingest_prepared(prepared).unwrap(),
        [IngestOutcome::Stored, IngestOutcome::Duplicate, IngestOutcome::Stored, IngestOutcome::Duplicate],
        "'b' arrived in between: a duplicate, as if the batch had been prepared after it"
    );
    assert_eq!(store.vehicle_totals("north", "bus-1").unwrap().trips_recorded, 3);
    assert_eq!(store.vehicle_totals("north", "bus-1").unwrap().friction_energy_j, 3e6);
    assert_eq!(store.vehicle_totals("north", "bus-2").unwrap().trips_recorded, 1);
    let rolled: u32 = store.daily_energy("north", "bus-1").unwrap().iter().map(|d| d.trips).sum();
    assert_eq!(rolled, 3, "the roll-up counts each trip once");
    // Prepared with nothing in between: as ingest_trips.
    let prepared = store.prepare_trips(vec![trip("north", "bus-2", "y", at(4), 1e6), trip("north", "bus-2", "x", at(3), 1e6)]).unwrap();
    assert_eq!(store.ingest_prepared(prepared).unwrap(), [IngestOutcome::Stored, IngestOutcome::Duplicate]);
    assert_eq!(store.vehicle_totals("north", "bus-2").unwrap().trips_recorded, 2);
}

fn inspections_and_replacements_once(engine: &Engine) {
    let store = &engine.store;
    store.upsert_vehicle(&vehicle("north", "bus-1")).unwrap();
    let first = inspection("bus-1", "ins-1", 12.5, T0);
    assert_eq!(store.record_inspection(&first).unwrap(), InsertOutcome::Stored);
    assert_eq!(store.record_inspection(&first).unwrap(), InsertOutcome::Duplicate);
    let changed = inspection("bus-1", "ins-1", 11.0, T0);
    assert_eq!(store.record_inspection(&changed).unwrap(), InsertOutcome::Differs(first.clone()), "a changed resend names the stored values");
    let fitted = replacement("bus-1", "rep-1", T0 + DAY);
    assert_eq!(store.record_replacement(&fitted).unwrap(), InsertOutcome::Stored);
    assert_eq!(store.record_replacement(&fitted).unwrap(), InsertOutcome::Duplicate);
    let moved = ReplacementRecord { replaced_at_ms: T0, ..fitted.clone() };
    assert_eq!(store.record_replacement(&moved).unwrap(), InsertOutcome::Differs(fitted.clone()));
    let history = store.service_history("north", "bus-1").unwrap();
    assert_eq!(history.inspections, [first]);
    assert_eq!(history.replacements, [fitted]);
}

fn history_and_corrections(engine: &Engine) {
    let store = &engine.store;
    store.upsert_vehicle(&vehicle("north", "bus-1")).unwrap();
    for (id, mm, at) in [("i-3", 9.0, T0 + 2 * DAY), ("i-1", 12.0, T0), ("i-2", 11.0, T0 + DAY)] {
        store.record_inspection(&inspection("bus-1", id, mm, at)).unwrap();
    }
    store.record_replacement(&replacement("bus-1", "r-1", T0 + 3 * DAY)).unwrap();
    let ids = |h: &ServiceHistory| h.inspections.iter().map(|i| i.inspection_id.clone()).collect::<Vec<_>>();
    assert_eq!(ids(&store.service_history("north", "bus-1").unwrap()), ["i-1", "i-2", "i-3"], "sorted by time");

    let void = CorrectionRecord {
        fleet_id: "north".into(),
        vehicle_id: "bus-1".into(),
        kind: RecordKind::Inspection,
        record_id: "i-2".into(),
        reason: "wrong bus".into(),
        corrected_at_ms: T0 + 4 * DAY,
        superseded_by: None,
    };
    assert_eq!(store.correct_record(&void, None).unwrap(), CorrectionOutcome::Stored);
    assert_eq!(store.correct_record(&CorrectionRecord { corrected_at_ms: T0 + 5 * DAY, ..void.clone() }, None).unwrap(), CorrectionOutcome::Duplicate);
    let other = CorrectionRecord { reason: "another reason".into(), ..void.clone() };
    assert_eq!(store.correct_record(&other, None).unwrap(), CorrectionOutcome::AlreadyCorrected(void.clone()));
    assert_eq!(ids(&store.service_history("north", "bus-1").unwrap()), ["i-1", "i-3"], "a voided record leaves the history");

    let missing = CorrectionRecord { record_id: "i-9".into(), ..void.clone() };
    assert_eq!(store.correct_record(&missing, None).unwrap(), CorrectionOutcome::NoSuchRecord);

    // Superseding with an id already taken changes nothing.
    let taken = CorrectionRecord { record_id: "i-3".into(), reason: "typo".into(), superseded_by: Some("i-1".into()), ..void.clone() };
    let clash = ServiceEntry::Inspection(inspection("bus-1", "i-1", 8.0, T0 + 2 * DAY));
    assert_eq!(store.correct_record(&taken, Some(&clash)).unwrap(), CorrectionOutcome::IdTaken);
    assert_eq!(store.service_records("north", "bus-1").unwrap().corrections.len(), 1, "the refused correction is not stored");

    let supersede = CorrectionRecord { superseded_by: Some("i-3c".into()), ..taken };
    let corrected = ServiceEntry::Inspection(inspection("bus-1", "i-3c", 9.5, T0 + 2 * DAY));
    assert_eq!(store.correct_record(&supersede, Some(&corrected)).unwrap(), CorrectionOutcome::Stored);
    let history = store.service_history("north", "bus-1").unwrap();
    assert_eq!(ids(&history), ["i-1", "i-3c"]);
    assert_eq!(history.inspections[1].thickness_mm, 9.5);
    let records = store.service_records("north", "bus-1").unwrap();
    assert_eq!(records.all.inspections.len(), 4, "every record is kept");
    assert_eq!(records.corrections.len(), 2);
    assert_eq!(records.all.replacements.len(), 1);

    let void_replacement = CorrectionRecord { kind: RecordKind::Replacement, record_id: "r-1".into(), superseded_by: None, ..void };
    assert_eq!(store.correct_record(&void_replacement, None).unwrap(), CorrectionOutcome::Stored);
    assert!(store.service_history("north", "bus-1").unwrap().replacements.is_empty());
}

fn due_index_ranges_and_cursors(engine: &Engine) {
    let store = &engine.store;
    let start = 20_100.0;
    for (i, vehicle_id) in ["v-a", "v-b", "v-c", "v-d", "v-e"].iter().enumerate() {
        let first = start + 10.0 * i as f64;
        store.put_forecasts(&forecasts(vehicle_id, vec![part(1, Component::Friction, first), part(1, Component::Disc, first + 5.0), part(2, Component::Friction, first)])).unwrap();
    }
    // Same due day for two parts of one vehicle: index order breaks the tie by axle, then component.
    let everything = store.scan_due("north", BandLevel::P80, i64::MAX, None, usize::MAX).unwrap();
    assert_eq!(everything.len(), 15);
    assert!(everything.windows(2).all(|w| w[0] < w[1]), "index order: due, vehicle, axle, component");
    assert_eq!(everything[0].vehicle_id, "v-a");
    assert_eq!((everything[0].axle_index, everything[1].axle_index), (1, 2));
    // P80 due_earliest is the 10th percentile: first + 9 days.
    assert_eq!(everything[0].due_earliest_ms, days_to_ms(start + 9.0));

    let before = days_to_ms(start + 30.0);
    let window = store.scan_due("north", BandLevel::P80, before, None, usize::MAX).unwrap();
    assert!(window.iter().all(|c| c.due_earliest_ms < before));
    assert_eq!(window.len(), 8, "v-a (3), v-b (3), v-c friction parts (2)");
    // Paging by cursor gives the same list.
    let mut paged = Vec::new();
    let mut after: Option<DueCursor> = None;
    loop {
        let page = store.scan_due("north", BandLevel::P80, before, after.as_ref(), 3).unwrap();
        if page.is_empty() {
            break;
        }
        after = page.last().cloned();
        paged.extend(page);
    }
    assert_eq!(paged, window);
    // Another level reads its own quantile; another fleet sees nothing.
    let p50 = store.scan_due("north", BandLevel::P50, i64::MAX, None, 1).unwrap();
    assert_eq!(p50[0].due_earliest_ms, days_to_ms(start + 24.0));
    assert!(store.scan_due("south", BandLevel::P80, i64::MAX, None, 10).unwrap().is_empty());

    // Replacing a vehicle's forecasts replaces its index entries.
    store.put_forecasts(&forecasts("v-a", vec![part(1, Component::Friction, start + 100.0)])).unwrap();
    let now = store.scan_due("north", BandLevel::P80, i64::MAX, None, usize::MAX).unwrap();
    assert_eq!(now.iter().filter(|c| c.vehicle_id == "v-a").count(), 1);
    assert_eq!(now.len(), 13);
    assert_eq!(store.get_forecasts("north", "v-a").unwrap().unwrap().parts.len(), 1);
    assert_eq!(store.fleet_forecasts("north").unwrap().len(), 5);
    assert_eq!(store.get_forecasts("north", "v-z").unwrap(), None);
    // A page's vehicles in one read: those with forecasts, each once, as one at a time gives them.
    let mut many = store.get_many_forecasts("north", &["v-e", "v-a", "v-z", "v-c"]).unwrap();
    many.sort_by(|a, b| a.vehicle_id.cmp(&b.vehicle_id));
    let one_by_one: Vec<VehicleForecasts> = ["v-a", "v-c", "v-e"].iter().map(|v| store.get_forecasts("north", v).unwrap().unwrap()).collect();
    assert_eq!(many, one_by_one);
    assert!(store.get_many_forecasts("south", &["v-a"]).unwrap().is_empty(), "another fleet's vehicle of the same id is not read");
    assert!(store.get_many_forecasts("north", &[]).unwrap().is_empty());
}

fn stale_marks_and_generations(engine: &Engine) {
    let store = &engine.store;
    store.mark_stale("north", &["v-1".into(), "v-2".into(), "v-1".into()]).unwrap();
    store.mark_stale("south", &["s-1".into()]).unwrap();
    assert_eq!(store.count_stale("north").unwrap(), 2);
    let marks = store.stale_vehicles(10).unwrap();
    assert_eq!(marks.iter().map(|m| (m.fleet_id.as_str(), m.vehicle_id.as_str())).collect::<Vec<_>>(), [("north", "v-1"), ("north", "v-2"), ("south", "s-1")]);
    let old = marks[0].clone();
    store.mark_stale("north", &["v-1".into()]).unwrap();
    store.clear_stale(&old).unwrap();
    assert_eq!(store.count_stale("north").unwrap(), 2, "a mark renewed since it was read stays");
    let renewed = store.stale_vehicles(1).unwrap().remove(0);
    assert!(renewed.generation > old.generation);
    store.clear_stale(&renewed).unwrap();
    store.clear_stale(&marks[1]).unwrap();
    assert_eq!(store.count_stale("north").unwrap(), 0);
    assert_eq!(store.stale_vehicles(10).unwrap().len(), 1);
    assert_eq!(store.claim_stale(10).unwrap().len(), 1, "one process claims what is stale");
}

fn priors_round_trip(engine: &Engine) {
    let store = &engine.store;
    assert_eq!(store.get_priors("north").unwrap(), None);
    let prior = WearPrior {
        mean_mm_per_mj: 0.0021,
        between_sd_mm_per_mj: 0.0004,
        vehicles: 12,
        residual_sd_mm: 0.3,
        residual_degrees_of_freedom: 30.0,
        residual_autocorrelation: 0.1,
        weight_sum: 1.0e7,
        weighted_rate_sum: 2.1e4,
        members: vec![],
        pad_coupling: None,
    };
    let priors = FleetPriors { groups: vec![GroupPrior { vehicle_class: "city-bus".into(), axle_index: 1, component: Component::Friction, prior }] };
    store.put_priors("north", &priors).unwrap();
    assert_eq!(store.get_priors("north").unwrap(), Some(priors.clone()));
    store.put_priors("north", &FleetPriors::default()).unwrap();
    assert_eq!(store.get_priors("north").unwrap(), Some(FleetPriors::default()));
    assert!(store.lock_fleet_priors("north").unwrap().is_some());
}

fn tokens_and_audit(engine: &Engine) {
    let store = &engine.store;
    let token = TokenRecord {
        token_id: "tok-1".into(),
        secret_sha256: [7; 32],
        fleet_id: Some("north".into()),
        role: Role::Workshop,
        label: "east workshop".into(),
        created_at_ms: T0,
        created_by: "bootstrap".into(),
        revoked_at_ms: None,
    };
    let operator = TokenRecord { token_id: "op".into(), secret_sha256: [9; 32], fleet_id: None, role: Role::Operator, ..token.clone() };
    store.put_token(&token).unwrap();
    store.put_token(&operator).unwrap();
    assert_eq!(store.token_by_hash(&[7; 32]).unwrap(), Some(token.clone()));
    assert_eq!(store.token_by_hash(&[8; 32]).unwrap(), None);
    let revoked = TokenRecord { revoked_at_ms: Some(T0 + DAY), ..token };
    store.put_token(&revoked).unwrap();
    assert_eq!(store.token_by_hash(&[7; 32]).unwrap(), Some(revoked));
    assert_eq!(store.list_tokens().unwrap().len(), 2);

    for (at, action) in [(T0, "a"), (T0, "b"), (T0 + 1, "c"), (T0 - 1, "z")] {
        store.append_audit(&AuditRecord { at_ms: at, fleet_id: "north".into(), token_id: "tok-1".into(), role: Role::Workshop, action: action.into(), subject: "s".into() }).unwrap();
    }
    store.append_audit(&AuditRecord { at_ms: T0, fleet_id: "south".into(), token_id: "op".into(), role: Role::Operator, action: "x".into(), subject: "s".into() }).unwrap();
    let all = store.list_audit("north", None, 100).unwrap();
    assert_eq!(all.iter().map(|(_, e)| e.action.as_str()).collect::<Vec<_>>(), ["z", "a", "b", "c"], "oldest first; same instant in write order");
    let page = store.list_audit("north", Some(all[1].0), 2).unwrap();
    assert_eq!(page.iter().map(|(_, e)| e.action.as_str()).collect::<Vec<_>>(), ["b", "c"]);
}

fn schema_version_refused(engine: &Engine) {
    match (engine.reopen_with_version)(99) {
        Err(StoreError::NewerSchema { found, .. }) => assert_eq!(found, 99),
        other => panic!("a newer schema must be refused, got {other:?}"),
    }
}

fn backup_export_verifies(engine: &Engine) {
    let store = &engine.store;
    store.upsert_fleet(&FleetRecord::default_for("north")).unwrap();
    store.upsert_vehicle(&vehicle("north", "bus-1")).unwrap();
    store.ingest_trips(&[trip("north", "bus-1", "a", T0, 1e6), trip("north", "bus-1", "b", T0 + DAY, 2e6)]).unwrap();
    store.record_inspection(&inspection("bus-1", "i-1", 12.0, T0)).unwrap();
    let (mut file, summary) = store.export_backup(T0).unwrap();
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("b.backup");
    std::io::copy(&mut file, &mut std::fs::File::create(&path).unwrap()).unwrap();
    let verified = backup_file::verify(&path).unwrap();
    assert_eq!(verified, summary);
    let totals = verified.tallies.totals();
    assert_eq!((totals.fleet.count, totals.vehicles.count, totals.trips.count, totals.inspections.count), (1, 1, 2, 1));
}

/// A store whose last handle is dropped on an async worker thread (as the server's is when
/// its runtime shuts down) closes without panicking.
fn dropped_on_an_async_worker(engine: &Engine) {
    let store = (engine.second)();
    store.upsert_fleet(&FleetRecord::default_for("north")).unwrap();
    let runtime = tokio::runtime::Builder::new_multi_thread().worker_threads(1).enable_all().build().unwrap();
    runtime.block_on(async move { tokio::spawn(async move { drop(store) }).await }).expect("the store was dropped without a panic");
    assert!(engine.store.get_fleet("north").unwrap().is_some(), "the other handle still works");
}

/// The fleet's forecasts one at a time: the same records, in vehicle order, as the whole-fleet
/// read; nothing from another fleet; the visitor's error ends the scan and comes back.
fn forecasts_replaced_together(engine: &Engine) {
    let store = &engine.store;
    let start = 20_100.0;
    store.put_forecasts(&forecasts("v-a", vec![part(1, Component::Friction, start), part(1, Component::Disc, start + 40.0)])).unwrap();
    let first_a = store.get_forecasts("north", "v-a").unwrap();
    let a = forecasts("v-a", vec![part(1, Component::Friction, start + 20.0), part(1, Component::Disc, start + 40.0)]);
    let b = forecasts("v-b", vec![part(2, Component::Friction, start + 5.0)]);
    assert_eq!(store.replace_forecasts(&[a.clone(), b.clone()]).unwrap(), vec![first_a, None], "what each vehicle held before");
    assert_eq!(store.get_forecasts("north", "v-a").unwrap(), Some(a.clone()));
    assert_eq!(store.get_forecasts("north", "v-b").unwrap(), Some(b.clone()));
    // The index holds the new entries only: v-b's, v-a's moved pad, v-a's unchanged rotor.
    let due: Vec<(String, i64)> =
        store.scan_due("north", BandLevel::P80, i64::MAX, None, usize::MAX).unwrap().into_iter().map(|c| (c.vehicle_id, c.due_earliest_ms)).collect();
    let expected = vec![("v-b".to_owned(), days_to_ms(start + 14.0)), ("v-a".to_owned(), days_to_ms(start + 29.0)), ("v-a".to_owned(), days_to_ms(start + 49.0))];
    assert_eq!(due, expected);
    // The same again changes nothing and returns the stored ones.
    assert_eq!(store.replace_forecasts(&[a.clone(), b.clone()]).unwrap(), vec![Some(a), Some(b)]);
    assert_eq!(store.scan_due("north", BandLevel::P80, i64::MAX, None, usize::MAX).unwrap().len(), 3);
    assert!(store.replace_forecasts(&[]).unwrap().is_empty());
}

fn fleet_forecasts_visited_one_at_a_time(engine: &Engine) {
    let store = &engine.store;
    for (n, id) in ["bus-3", "bus-1", "bus-2"].into_iter().enumerate() {
        store.upsert_vehicle(&vehicle("north", id)).unwrap();
        store.put_forecasts(&forecasts(id, vec![part(1, Component::Friction, 20_100.0 + n as f64)])).unwrap();
    }
    store.upsert_vehicle(&vehicle("west", "w-1")).unwrap();
    store.put_forecasts(&VehicleForecasts { fleet_id: "west".into(), ..forecasts("w-1", vec![]) }).unwrap();
    let mut seen = Vec::new();
    store.visit_fleet_forecasts("north", &mut |f| {
        seen.push(f);
        Ok(())
    })
    .unwrap();
    assert_eq!(seen.iter().map(|f| f.vehicle_id.as_str()).collect::<Vec<_>>(), ["bus-1", "bus-2", "bus-3"]);
    assert_eq!(seen, store.fleet_forecasts("north").unwrap());
    let mut visited = 0;
    let stopped = store.visit_fleet_forecasts("north", &mut |_| {
        visited += 1;
        Err(StoreError::Engine("enough".into()))
    });
    assert!(matches!(stopped, Err(StoreError::Engine(m)) if m == "enough"));
    assert_eq!(visited, 1, "the first error ends the scan");
}

/// A round after a burst of new data computes (and stores) each vehicle once: it begins by
/// estimating the priors from the own fits it is about to store
/// (`forecaster::priors_for_round`), so its end finds them where they were and marks nothing
/// stale again. Without that step the first round ran on no priors, found them all new at its
/// end and computed every vehicle a second time.
fn a_round_after_new_data_computes_each_vehicle_once(engine: &Engine) {
    use brakeledger::config::ForecastConfig;
    use brakeledger::forecaster::{priors_for_round, refresh_pass};
    let store = engine.store.as_ref();
    let now = brakeledger::convert::now_ms();
    // Twelve vehicles, 60 days of trips (50 MJ a day), and three readings of the front pads
    // wearing 0.04 to 0.0565 mm a day: more vehicles than one pass of four takes.
    let vehicles: Vec<String> = (1..=12).map(|n| format!("bus-{n:02}")).collect();
    for (n, id) in vehicles.iter().enumerate() {
        store.upsert_vehicle(&vehicle("north", id)).unwrap();
        let trips: Vec<TripRecord> = (1..=60).map(|d| trip("north", id, &format!("t{d}"), now - d * DAY + 3_600_000, 50e6)).collect();
        store.ingest_trips(&trips).unwrap();
        let per_day = 0.04 + 0.0015 * n as f64;
        for (k, days_ago) in [50i64, 30, 10].into_iter().enumerate() {
            store.record_inspection(&inspection(id, &format!("i{k}"), 20.0 - per_day * (60 - days_ago) as f64, now - days_ago * DAY)).unwrap();
        }
    }
    let config = ForecastConfig { batch_vehicles: 4, ..ForecastConfig::default() };
    priors_for_round(store, &config, now).unwrap();
    let priors = store.get_priors("north").unwrap().expect("priors estimated before the round");
    assert!(priors.find("city-bus", 1, Component::Friction).is_some(), "{priors:?}");
    let mut computed: std::collections::BTreeMap<String, usize> = std::collections::BTreeMap::new();
    let mut pending = std::collections::BTreeSet::new();
    for _ in 0..20 {
        let outcome = refresh_pass(store, &config, now, &mut pending, false).unwrap();
        for change in &outcome.changes {
            *computed.entry(change.after.vehicle_id.clone()).or_default() += 1;
        }
        if !outcome.remaining {
            break;
        }
    }
    assert_eq!(computed.keys().collect::<Vec<_>>(), vehicles.iter().collect::<Vec<_>>(), "every vehicle computed");
    assert!(computed.values().all(|n| *n == 1), "each vehicle computed once: {computed:?}");
    assert_eq!(store.get_priors("north").unwrap().as_ref(), Some(&priors), "the round's end left the priors where they were");
}

macro_rules! conformance {
    ($($test:ident),* $(,)?) => {
        mod sled {
            $( #[test] fn $test() { if let Some(engine) = super::sled_engine() { super::$test(&engine) } } )*
        }
        mod postgres_engine {
            $( #[test] fn $test() { if let Some(engine) = super::postgres_engine() { super::$test(&engine) } } )*
        }
    };
}

conformance!(
    fleets_and_vehicles,
    ingest_totals_and_daily_rollup,
    duplicates_from_two_concurrent_writers,
    a_batch_prepared_before_another_write_is_stored_as_if_prepared_after,
    inspections_and_replacements_once,
    history_and_corrections,
    due_index_ranges_and_cursors,
    stale_marks_and_generations,
    priors_round_trip,
    tokens_and_audit,
    schema_version_refused,
    backup_export_verifies,
    dropped_on_an_async_worker,
    a_round_after_new_data_computes_each_vehicle_once,
    fleet_forecasts_visited_one_at_a_time,
    forecasts_replaced_together,
);

// ---------------------------------------------------------------------------------------------
// PostgreSQL only: what several replicas need, and the move from the embedded engine.

#[test]
fn replicas_claim_disjoint_stale_vehicles_until_the_lease_ends() {
    let Some(database) = ScratchDatabase::for_test("brakeledger_test") else { return };
    let one = PostgresStore::open(&database.url).unwrap();
    let two = PostgresStore::open(&database.url).unwrap().with_claim_lease_ms(200);
    let ids: Vec<String> = (0..10).map(|i| format!("v-{i}")).collect();
    one.mark_stale("north", &ids).unwrap();
    let first = one.claim_stale(6).unwrap();
    let second = two.claim_stale(100).unwrap();
    assert_eq!((first.len(), second.len()), (6, 4));
    assert!(first.iter().all(|a| second.iter().all(|b| a.vehicle_id != b.vehicle_id)), "no vehicle is claimed twice");
    assert!(one.claim_stale(100).unwrap().len() == 6, "a replica keeps (renews) its own claims only");
    // A replica that stops (its lease of 200 ms runs out) leaves its vehicles to the others.
    std::thread::sleep(std::time::Duration::from_millis(300));
    assert_eq!(one.claim_stale(100).unwrap().len(), 10);
    // A new write ends a claim: the claimant's clear finds a newer generation and leaves the mark.
    let claimed = first[0].clone();
    two.mark_stale("north", std::slice::from_ref(&claimed.vehicle_id)).unwrap();
    one.clear_stale(&claimed).unwrap();
    assert!(two.claim_stale(100).unwrap().iter().any(|m| m.vehicle_id == claimed.vehicle_id));
    assert_eq!(one.stale_vehicles(100).unwrap().len(), 10, "listing claims nothing");
}

#[test]
fn one_replica_at_a_time_reestimates_a_fleets_priors() {
    let Some(database) = ScratchDatabase::for_test("brakeledger_test") else { return };
    let one = PostgresStore::open(&database.url).unwrap();
    let two = PostgresStore::open(&database.url).unwrap();
    let held = one.lock_fleet_priors("north").unwrap();
    assert!(held.is_some());
    assert!(two.lock_fleet_priors("north").unwrap().is_none(), "another replica holds it");
    assert!(two.lock_fleet_priors("south").unwrap().is_some(), "per fleet");
    drop(held);
    assert!(two.lock_fleet_priors("north").unwrap().is_some(), "released when dropped");
}

#[test]
fn forecasts_stored_by_one_replica_reach_the_listener_of_another() {
    let Some(database) = ScratchDatabase::for_test("brakeledger_test") else { return };
    let one = PostgresStore::open(&database.url).unwrap();
    let two = PostgresStore::open(&database.url).unwrap();
    let (sender, received) = std::sync::mpsc::channel();
    let _listening = two.listen_for_forecasts(move |f| drop(sender.send(f.vehicle_id))).unwrap();
    std::thread::sleep(std::time::Duration::from_millis(300)); // the listener's LISTEN is in place
    two.put_forecasts(&forecasts("own", vec![part(1, Component::Friction, 20_100.0)])).unwrap();
    one.put_forecasts(&forecasts("remote", vec![part(1, Component::Friction, 20_100.0)])).unwrap();
    let got = received.recv_timeout(std::time::Duration::from_secs(10)).unwrap();
    assert_eq!(got, "remote", "a replica hears the others, not itself");
    assert!(received.recv_timeout(std::time::Duration::from_millis(500)).is_err());
}

/// A listener whose connection is cut (its server process terminated, as a restart or a network
/// failure would) reconnects and replays what was stored meanwhile: a forecast stored by
/// another replica while no LISTEN was in place still arrives.
#[test]
fn a_listener_that_lost_its_connection_replays_what_it_missed() {
    let Some(database) = ScratchDatabase::for_test("brakeledger_test") else { return };
    let one = PostgresStore::open(&database.url).unwrap();
    let two = PostgresStore::open(&database.url).unwrap();
    one.upsert_fleet(&FleetRecord { fleet_id: "north".into(), time_zone: "UTC".into(), display_name: "North".into() }).unwrap();
    let (sender, received) = std::sync::mpsc::channel();
    let _listening = two.listen_for_forecasts(move |f| drop(sender.send(f.vehicle_id))).unwrap();
    std::thread::sleep(std::time::Duration::from_millis(300)); // the listener's LISTEN is in place
    one.put_forecasts(&forecasts("before", vec![part(1, Component::Friction, 20_100.0)])).unwrap();
    assert_eq!(received.recv_timeout(std::time::Duration::from_secs(10)).unwrap(), "before");
    // Cut the listener's connections; it waits a second before it reconnects.
    let mut admin = ::postgres::Client::connect(&database.url, ::postgres::NoTls).unwrap();
    let cut = admin
        .query(
            "SELECT pg_terminate_backend(pid) FROM pg_stat_activity WHERE datname = current_database() AND application_name = $1",
            &[&brakeledger::store::postgres::replicas::LISTENER_APPLICATION_NAME],
        )
        .unwrap();
    assert!(!cut.is_empty(), "the listener's connections were found");
    one.put_forecasts(&forecasts("while-away", vec![part(1, Component::Friction, 20_200.0)])).unwrap();
    let mut heard = Vec::new();
    while let Ok(vehicle) = received.recv_timeout(std::time::Duration::from_secs(10)) {
        heard.push(vehicle);
        if heard.iter().any(|v| v == "while-away") {
            break;
        }
    }
    assert!(heard.iter().any(|v| v == "while-away"), "the forecast stored while the listener was away was replayed: {heard:?}");
}

/// The move from the embedded engine to PostgreSQL: a backup of a sled directory restored into
/// PostgreSQL, exported again, holds exactly the same entries (same keys, same stored bytes).
#[test]
fn sled_backup_restores_into_postgres_and_exports_the_same_entries() {
    let Some(database) = ScratchDatabase::for_test("brakeledger_test") else { return };
    let dir = tempfile::tempdir().unwrap();
    let sled = SledStore::open(&dir.path().join("data")).unwrap();
    sled.upsert_fleet(&FleetRecord { fleet_id: "north".into(), time_zone: "Europe/Lisbon".into(), display_name: "North".into() }).unwrap();
    for v in 0..5 {
        let id = format!("bus-{v}");
        sled.upsert_vehicle(&vehicle("north", &id)).unwrap();
        let trips: Vec<TripRecord> = (0..40).map(|i| trip("north", &id, &format!("t{i}"), T0 + i * 7 * 3_600_000, 1.1e6 * (1.0 + (i % 7) as f64 / 3.0))).collect();
        sled.ingest_trips(&trips).unwrap();
        sled.record_inspection(&InspectionRecord { vehicle_id: id.clone(), ..inspection(&id, "i-1", 12.0, T0) }).unwrap();
        sled.record_replacement(&replacement(&id, "r-1", T0 + DAY)).unwrap();
    }
    sled.upsert_vehicle(&vehicle("south", "van-1")).unwrap();
    let void = CorrectionRecord {
        fleet_id: "north".into(),
        vehicle_id: "bus-1".into(),
        kind: RecordKind::Replacement,
        record_id: "r-1".into(),
        reason: "wrong bus".into(),
        corrected_at_ms: T0 + 2 * DAY,
        superseded_by: None,
    };
    sled.correct_record(&void, None).unwrap();
    sled.put_token(&TokenRecord {
        token_id: "op".into(),
        secret_sha256: [3; 32],
        fleet_id: None,
        role: Role::Operator,
        label: "first".into(),
        created_at_ms: T0,
        created_by: "bootstrap".into(),
        revoked_at_ms: None,
    })
    .unwrap();
    sled.append_audit(&AuditRecord { at_ms: T0, fleet_id: "north".into(), token_id: "op".into(), role: Role::Operator, action: "a".into(), subject: "s".into() }).unwrap();

    let save = |store: &dyn Store, name: &str| {
        let (mut file, _) = store.export_backup(T0).unwrap();
        let path = dir.path().join(name);
        std::io::copy(&mut file, &mut std::fs::File::create(&path).unwrap()).unwrap();
        path
    };
    let from_sled = save(&sled, "sled.backup");
    brakeledger::store::postgres::backup::restore(&from_sled, &database.url).unwrap();
    let postgres = PostgresStore::open(&database.url).unwrap();
    let from_postgres = save(&postgres, "postgres.backup");

    let entries = |path: &std::path::Path| {
        let mut all = std::collections::BTreeSet::new();
        backup_file::for_each_entry(path, |tree, key, value| {
            all.insert((tree.to_owned(), key, value));
            Ok(())
        })
        .unwrap();
        all
    };
    let (a, b) = (entries(&from_sled), entries(&from_postgres));
    assert_eq!(a.len(), b.len());
    assert!(a == b, "the entries differ: {:?}", a.symmetric_difference(&b).take(3).collect::<Vec<_>>());
    // Every vehicle waits for its forecasts; a second restore into the same database is refused.
    assert_eq!(postgres.count_stale("north").unwrap(), 5);
    let again = brakeledger::store::postgres::backup::restore(&from_sled, &database.url);
    assert!(matches!(again, Err(backup_file::BackupError::TargetNotEmpty(_))), "{again:?}");
    // And back: the PostgreSQL backup restores into an empty sled directory.
    backup_file::restore(&from_postgres, &dir.path().join("back"), brakeledger::store::sled_engine::PageSettings::with_cache(8 << 20)).unwrap();
}
