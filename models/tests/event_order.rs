//! Issue 7, defect 1: a part's events are ordered by their full timestamps, and a reading
//! stamped with the same instant as a replacement belongs to the part removed.

use brakeledger_models::domain::Component;
use brakeledger_models::wear_history::{history_from_daily_energy, DatedEvent, PartEventKind};

const HOUR: f64 = 1.0 / 24.0;

fn inspection(day: f64, thickness_mm: f64) -> DatedEvent {
    DatedEvent { day, kind: PartEventKind::Inspection { thickness_mm } }
}

fn replacement(day: f64) -> DatedEvent {
    DatedEvent { day, kind: PartEventKind::Replacement { new_thickness_mm: 22.0 } }
}

fn cycles_of(events: &[DatedEvent]) -> Vec<Vec<f64>> {
    let daily = vec![50.0; 400];
    let history = history_from_daily_energy(1, Component::Friction, 22.0, 3.0, 20_000, &daily, &[], events);
    history.cycles().iter().map(|c| c.points.iter().map(|p| p.thickness_mm).collect()).collect()
}

#[test]
fn a_worn_reading_taken_an_hour_before_the_replacement_stays_in_the_old_cycle() {
    // Workshop round on day 20 200: the worn pad is measured at 07:10 and replaced at 07:40.
    let day = 20_200.0;
    let events = [
        replacement(20_000.0 + 5.0 * HOUR),
        inspection(20_100.0 + 6.0 * HOUR, 12.5),
        replacement(day + 7.0 * HOUR + 40.0 / 1440.0),
        inspection(day + 7.0 * HOUR + 10.0 / 1440.0, 3.4),
        inspection(20_300.0 + 9.0 * HOUR, 17.0),
    ];
    let cycles = cycles_of(&events);
    assert_eq!(cycles, vec![vec![12.5, 3.4], vec![17.0]], "the 3.4 mm reading is of the part removed");
}

#[test]
fn an_inspection_and_a_replacement_at_the_same_instant_put_the_inspection_first() {
    let instant = 20_200.0 + 7.5 * HOUR;
    // Given in either order, the result is the same.
    for events in [
        vec![replacement(20_000.0), inspection(20_100.0, 12.0), replacement(instant), inspection(instant, 3.2)],
        vec![replacement(20_000.0), inspection(20_100.0, 12.0), inspection(instant, 3.2), replacement(instant)],
    ] {
        assert_eq!(cycles_of(&events), vec![vec![12.0, 3.2], vec![]]);
    }
}

#[test]
fn readings_later_on_the_day_of_a_replacement_belong_to_the_new_part() {
    let day = 20_200.0;
    let events = [replacement(20_000.0), replacement(day + 7.0 * HOUR), inspection(day + 15.0 * HOUR, 21.9)];
    assert_eq!(cycles_of(&events), vec![vec![], vec![21.9]]);
}
