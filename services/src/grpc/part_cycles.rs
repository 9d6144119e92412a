//! Which fitted part each stored reading of a part position is of, for the wear trajectory.
//!
//! The rule is the one the models order a part's events by
//! (`brakeledger_models::wear_history::order_events`, documented in maintenance.proto): by full
//! timestamp, and a reading stamped with exactly the same instant as a replacement comes
//! before it, so it is a reading of the part removed. A reading therefore belongs to the part
//! fitted by the latest replacement strictly before it, and it is `n` parts ago when `n`
//! replacements happened at or after its instant. The tests check this against `order_events`.

/// Where one reading sits among the part position's replacements.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ReadingCycle {
    /// 0 = a reading of the part in place now, 1 = of the part before it, and so on.
    pub cycles_ago: u32,
    /// When the part measured was fitted, ms; `None` when that fitting is not on record.
    pub fitted_at_ms: Option<i64>,
}

/// The cycle of a reading taken at `measured_at_ms`, given every replacement instant (ms) of
/// the same part position, in any order.
pub fn reading_cycle(measured_at_ms: i64, replacements_ms: &[i64]) -> ReadingCycle {
    let cycles_ago = replacements_ms.iter().filter(|&&r| r >= measured_at_ms).count();
    ReadingCycle {
        cycles_ago: u32::try_from(cycles_ago).unwrap_or(u32::MAX),
        fitted_at_ms: replacements_ms.iter().copied().filter(|&r| r < measured_at_ms).max(),
    }
}

/// [`reading_cycle`] of each reading, in the order given.
pub fn readings_by_cycle(measured_at_ms: &[i64], replacements_ms: &[i64]) -> Vec<ReadingCycle> {
    measured_at_ms.iter().map(|&m| reading_cycle(m, replacements_ms)).collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use brakeledger_models::wear_history::{order_events, DatedEvent};
    use brakeledger_models::PartEventKind;
    use proptest::prelude::*;

    const MS_PER_DAY: f64 = 86_400_000.0;

    #[test]
    fn a_worn_reading_just_before_a_replacement_is_of_the_old_part() {
        let day = 20_000 * 86_400_000_i64;
        let inspected = day + (7 * 60 + 10) * 60_000; // 07:10
        let replaced = day + (7 * 60 + 40) * 60_000; // 07:40
        assert_eq!(reading_cycle(inspected, &[replaced]), ReadingCycle { cycles_ago: 1, fitted_at_ms: None });
        // The same instant: still the part removed.
        assert_eq!(reading_cycle(replaced, &[replaced]), ReadingCycle { cycles_ago: 1, fitted_at_ms: None });
        // One millisecond later: the new part.
        assert_eq!(reading_cycle(replaced + 1, &[replaced]), ReadingCycle { cycles_ago: 0, fitted_at_ms: Some(replaced) });
    }

    proptest! {
        /// The cycle of every reading equals the one found by putting the events in the
        /// models' order (`order_events`) and counting the replacements that follow it.
        /// Instants are drawn from a few values so that ties are common.
        #[test]
        fn agrees_with_the_models_event_order(
            readings in prop::collection::vec(0i64..12, 0..12),
            replacements in prop::collection::vec(0i64..12, 0..5),
        ) {
            let ms = |slot: i64| 19_000 * 86_400_000 + slot * 30 * 60_000; // half-hour slots
            let readings: Vec<i64> = readings.into_iter().map(ms).collect();
            let replacements: Vec<i64> = replacements.into_iter().map(ms).collect();
            // Each reading carries its index as its thickness, so it can be found after sorting.
            let mut events: Vec<DatedEvent> = replacements
                .iter()
                .map(|&r| DatedEvent { day: r as f64 / MS_PER_DAY, kind: PartEventKind::Replacement { new_thickness_mm: 20.0 } })
                .chain(readings.iter().enumerate().map(|(i, &m)| DatedEvent { day: m as f64 / MS_PER_DAY, kind: PartEventKind::Inspection { thickness_mm: i as f64 } }))
                .collect();
            order_events(&mut events);
            let mut seen_replacements = 0u32;
            let mut expected = vec![u32::MAX; readings.len()];
            for event in &events {
                match event.kind {
                    PartEventKind::Replacement { .. } => seen_replacements += 1,
                    PartEventKind::Inspection { thickness_mm } => expected[thickness_mm as usize] = seen_replacements,
                }
            }
            let total = replacements.len() as u32;
            let got = readings_by_cycle(&readings, &replacements);
            for (i, cycle) in got.iter().enumerate() {
                prop_assert_eq!(cycle.cycles_ago, total - expected[i], "reading {} at {}", i, readings[i]);
            }
        }
    }
}
