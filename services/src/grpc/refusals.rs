//! Refused trips of one ingest call, kept to a size a client can always receive: the first
//! `max_listed` one by one, every one counted under its field and reason.
//!
//! A stream with 200,000 bad trips once produced a 13.6 MB report, which standard clients refuse
//! (4 MB default limit), so the caller never learned what was stored. The listing is capped
//! (`[ingest] max_listed_rejections`), and so is the number of distinct (field, reason) pairs
//! counted (`[ingest] max_rejection_groups`: reasons quote values, so they can be as many as
//! the trips); refusals past that cap are counted under their field with "other reasons".

use std::collections::HashMap;

use brakeledger_models::domain::FieldViolation;
use brakeledger_proto::v1 as pb;

/// Reason under which refusals past the group cap are counted.
pub const OTHER_REASONS: &str = "other reasons";

/// The refusals of one call.
#[derive(Debug)]
pub struct Refusals {
    max_listed: usize,
    max_groups: usize,
    listed: Vec<pb::Rejection>,
    total: u64,
    groups: HashMap<(String, String), u64>,
}

impl Refusals {
    /// No refusals yet; lists at most `max_listed`, counts at most `max_groups` distinct pairs.
    pub fn new(max_listed: usize, max_groups: usize) -> Self {
        Self { max_listed, max_groups, listed: Vec::new(), total: 0, groups: HashMap::new() }
    }

    /// Records the refusal of the trip at `index`; returns it when it is listed, and the
    /// (field, reason) group it is counted under.
    pub fn refuse(&mut self, index: u64, trip_id: String, violations: Vec<FieldViolation>) -> (Option<pb::Rejection>, Option<(String, String)>) {
        let mut iter = violations.into_iter();
        let Some(first) = iter.next() else { return (None, None) };
        let others: Vec<String> = iter.map(|v| format!("{}: {}", v.field, v.reason)).collect();
        let reason = if others.is_empty() { first.reason } else { format!("{} (also {})", first.reason, others.join("; ")) };
        self.total += 1;
        let mut key = (first.field.clone(), reason.clone());
        if let Some(count) = self.groups.get_mut(&key) {
            *count += 1;
        } else if self.groups.len() < self.max_groups {
            self.groups.insert(key.clone(), 1);
        } else {
            key = (first.field.clone(), OTHER_REASONS.to_owned());
            *self.groups.entry(key.clone()).or_insert(0) += 1;
        }
        if self.listed.len() >= self.max_listed {
            return (None, Some(key));
        }
        let listed = pb::Rejection { index, trip_id, field: first.field, reason };
        self.listed.push(listed.clone());
        (Some(listed), Some(key))
    }

    /// Refusals so far, listed or not.
    pub fn total(&self) -> u64 {
        self.total
    }

    /// Fills the refusal fields of a report.
    pub fn into_report(self, report: &mut pb::IngestReport) {
        report.rejected_count = self.total;
        report.rejection_counts = sorted_counts(self.groups);
        report.rejected = self.listed;
    }
}

/// Counts by (field, reason), most frequent first (ties by field, then reason).
pub fn sorted_counts(groups: impl IntoIterator<Item = ((String, String), u64)>) -> Vec<pb::RejectionCount> {
    let mut counts: Vec<pb::RejectionCount> = groups.into_iter().map(|((field, reason), count)| pb::RejectionCount { field, reason, count }).collect();
    counts.sort_by(|a, b| b.count.cmp(&a.count).then_with(|| (&a.field, &a.reason).cmp(&(&b.field, &b.reason))));
    counts
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn violation(field: &str, reason: &str) -> Vec<FieldViolation> {
        vec![FieldViolation::new(field, reason)]
    }

    #[test]
    fn lists_the_first_and_counts_all() {
        let mut refusals = Refusals::new(2, 10);
        for i in 0..5u64 {
            refusals.refuse(i, format!("t{i}"), violation("distance_m", "must not be negative"));
        }
        refusals.refuse(5, "t5".into(), violation("end_time", "is required"));
        let mut report = pb::IngestReport::default();
        refusals.into_report(&mut report);
        assert_eq!(report.rejected.iter().map(|r| r.index).collect::<Vec<_>>(), vec![0, 1]);
        assert_eq!(report.rejected_count, 6);
        assert_eq!(
            report.rejection_counts,
            vec![
                pb::RejectionCount { field: "distance_m".into(), reason: "must not be negative".into(), count: 5 },
                pb::RejectionCount { field: "end_time".into(), reason: "is required".into(), count: 1 },
            ]
        );
    }

    proptest! {
        /// Whatever the refusals, the listing and the groups stay within their caps and the
        /// groups count every refusal exactly once.
        #[test]
        fn caps_hold_and_counts_add_up(
            reasons in proptest::collection::vec((0u8..4, 0u16..500), 0..600),
            max_listed in 0usize..50, max_groups in 0usize..20,
        ) {
            let mut refusals = Refusals::new(max_listed, max_groups);
            // The group each refusal is said to be counted under, tallied as IngestTrips acks do.
            let mut said = std::collections::HashMap::new();
            for (i, (field, reason)) in reasons.iter().enumerate() {
                let (_, group) = refusals.refuse(i as u64, String::new(), violation(&format!("f{field}"), &format!("r{reason}")));
                *said.entry(group.expect("one violation")).or_insert(0u64) += 1;
            }
            let mut report = pb::IngestReport::default();
            refusals.into_report(&mut report);
            prop_assert_eq!(&sorted_counts(said), &report.rejection_counts);
            prop_assert_eq!(report.rejected_count, reasons.len() as u64);
            prop_assert_eq!(report.rejected.len(), reasons.len().min(max_listed));
            prop_assert_eq!(report.rejection_counts.iter().map(|c| c.count).sum::<u64>(), reasons.len() as u64);
            // At most max_groups real pairs plus one "other reasons" entry per field (4 fields).
            prop_assert!(report.rejection_counts.len() <= max_groups + 4);
        }
    }
}
