//! The records brakeledger stores, independent of the engine. Times are milliseconds since the
//! Unix epoch (`_ms`), days are whole UTC days since the epoch, energies are J unless named `_mj`.

use brakeledger_models::domain::{Component, VehicleSpec};
use brakeledger_models::{PartOutlook, WearFit, WearPrior};
use serde::{Deserialize, Serialize};

/// Milliseconds in a day.
pub const MS_PER_DAY: i64 = 86_400_000;

/// The UTC day (days since the Unix epoch) an instant falls on.
pub fn utc_day(ms: i64) -> i64 {
    ms.div_euclid(MS_PER_DAY)
}

/// Settings of one fleet.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FleetRecord {
    /// Fleet identifier.
    pub fleet_id: String,
    /// IANA time zone name for calendar dates ("UTC" when not set).
    pub time_zone: String,
    /// Name for people.
    pub display_name: String,
}

impl FleetRecord {
    /// The settings of a fleet never set up.
    pub fn default_for(fleet_id: &str) -> Self {
        Self { fleet_id: fleet_id.to_owned(), time_zone: "UTC".to_owned(), display_name: String::new() }
    }
}

/// One registered vehicle.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct VehicleRecord {
    /// Fleet identifier.
    pub fleet_id: String,
    /// Vehicle identifier.
    pub vehicle_id: String,
    /// VIN, when known.
    pub vin: Option<String>,
    /// Class, mass and brakes.
    pub spec: VehicleSpec,
}

/// Stored trip totals of one vehicle.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct VehicleTotals {
    /// Distinct trips stored.
    pub trips_recorded: u64,
    /// Sum of friction energy, J.
    pub friction_energy_j: f64,
    /// Sum of distance, m.
    pub distance_m: f64,
    /// Latest trip end, ms; `None` before the first trip.
    pub last_trip_end_ms: Option<i64>,
}

/// One validated trip, with its energy resolved per axle.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TripRecord {
    /// Fleet identifier.
    pub fleet_id: String,
    /// Vehicle identifier.
    pub vehicle_id: String,
    /// Trip identifier, unique per vehicle.
    pub trip_id: String,
    /// Start, ms.
    pub start_ms: i64,
    /// End, ms.
    pub end_ms: i64,
    /// Distance, m.
    pub distance_m: f64,
    /// Friction braking energy after regeneration, J.
    pub friction_energy_j: f64,
    /// Friction energy per axle, J (the trip's split, or the vehicle's shares applied).
    pub axle_energy_j: Vec<f64>,
    /// Whether `axle_energy_j` came from the trip (true) or from the configured shares.
    pub axle_split_reported: bool,
    /// Brake applications.
    pub brake_applications: u32,
    /// Regenerated energy, J, when reported.
    pub regen_energy_j: Option<f64>,
    /// Energy of hot stops, J (0 when not reported).
    pub hot_energy_j: f64,
}

/// Friction energy of one vehicle on one UTC day, per axle: the roll-up models read.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct DailyEnergy {
    /// UTC day, days since the Unix epoch (trips count on the day they end).
    pub day: i64,
    /// Friction energy per axle, J.
    pub axle_energy_j: Vec<f64>,
    /// Energy of hot stops per axle, J.
    pub axle_hot_energy_j: Vec<f64>,
    /// Trips ending that day.
    pub trips: u32,
    /// Distance of those trips, m.
    pub distance_m: f64,
}

/// One measured thickness.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct InspectionRecord {
    /// Fleet identifier.
    pub fleet_id: String,
    /// Vehicle identifier.
    pub vehicle_id: String,
    /// Inspection identifier, unique per vehicle.
    pub inspection_id: String,
    /// Axle, 1 = front-most.
    pub axle_index: u32,
    /// Part measured.
    pub component: Component,
    /// Measured thickness, mm.
    pub thickness_mm: f64,
    /// When measured, ms.
    pub measured_at_ms: i64,
}

/// One part replaced.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ReplacementRecord {
    /// Fleet identifier.
    pub fleet_id: String,
    /// Vehicle identifier.
    pub vehicle_id: String,
    /// Replacement identifier, unique per vehicle.
    pub replacement_id: String,
    /// Axle, 1 = front-most.
    pub axle_index: u32,
    /// Part replaced.
    pub component: Component,
    /// Thickness of the part fitted, mm.
    pub new_thickness_mm: f64,
    /// When replaced, ms.
    pub replaced_at_ms: i64,
}

/// Which kind of workshop record.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
pub enum RecordKind {
    /// An inspection.
    Inspection,
    /// A replacement.
    Replacement,
}

impl RecordKind {
    /// Plain word for messages.
    pub fn word(self) -> &'static str {
        match self {
            RecordKind::Inspection => "inspection",
            RecordKind::Replacement => "replacement",
        }
    }
}

/// An inspection or a replacement.
#[derive(Debug, Clone, PartialEq)]
pub enum ServiceEntry {
    /// An inspection.
    Inspection(InspectionRecord),
    /// A replacement.
    Replacement(ReplacementRecord),
}

impl ServiceEntry {
    /// Its kind.
    pub fn kind(&self) -> RecordKind {
        match self {
            ServiceEntry::Inspection(_) => RecordKind::Inspection,
            ServiceEntry::Replacement(_) => RecordKind::Replacement,
        }
    }

    /// Its inspection_id or replacement_id.
    pub fn record_id(&self) -> &str {
        match self {
            ServiceEntry::Inspection(i) => &i.inspection_id,
            ServiceEntry::Replacement(r) => &r.replacement_id,
        }
    }
}

/// A voided or superseded workshop record: the record itself is kept unchanged; this note,
/// keyed by its kind and id, takes it out of the forecasts.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CorrectionRecord {
    /// Fleet identifier.
    pub fleet_id: String,
    /// Vehicle identifier.
    pub vehicle_id: String,
    /// Kind of the record corrected.
    pub kind: RecordKind,
    /// Id of the record corrected.
    pub record_id: String,
    /// Why, in plain words.
    pub reason: String,
    /// When the correction was stored, ms.
    pub corrected_at_ms: i64,
    /// The id of the record that supersedes it (same kind); `None` when voided.
    pub superseded_by: Option<String>,
}

impl CorrectionRecord {
    /// The same correction, ignoring when it was made (a repeated request is a duplicate).
    pub fn same_as(&self, other: &CorrectionRecord) -> bool {
        (&self.kind, &self.record_id, &self.reason, &self.superseded_by) == (&other.kind, &other.record_id, &other.reason, &other.superseded_by)
    }
}

/// What storing a record with an idempotency key did.
#[derive(Debug, Clone, PartialEq)]
pub enum InsertOutcome<T> {
    /// Stored now.
    Stored,
    /// The id was already stored with the same values; nothing changed.
    Duplicate,
    /// The id was already stored with other values (returned); nothing changed.
    Differs(T),
}

/// What a correction did.
#[derive(Debug, Clone, PartialEq)]
pub enum CorrectionOutcome {
    /// Stored now (with the superseding record, if any).
    Stored,
    /// The same correction was already stored; nothing changed.
    Duplicate,
    /// No record of that kind and id exists for the vehicle.
    NoSuchRecord,
    /// The record was already voided or superseded otherwise (the stored correction).
    AlreadyCorrected(CorrectionRecord),
    /// The superseding record's id is already taken by another record.
    IdTaken,
}

/// Every inspection and replacement of one vehicle, in force or not, with the corrections.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct ServiceRecords {
    /// Every record, in force or not, each list sorted by time.
    pub all: ServiceHistory,
    /// The corrections of the vehicle's records.
    pub corrections: Vec<CorrectionRecord>,
}

/// Inspections and replacements of one vehicle, each sorted by time.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct ServiceHistory {
    /// Inspections, oldest first.
    pub inspections: Vec<InspectionRecord>,
    /// Replacements, oldest first.
    pub replacements: Vec<ReplacementRecord>,
}

/// The band levels kept in the due index.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum BandLevel {
    /// 50 % band (25th to 75th percentile).
    P50,
    /// 80 % band (10th to 90th percentile), the default.
    P80,
    /// 90 % band (5th to 95th percentile).
    P90,
    /// 95 % band (2.5th to 97.5th percentile).
    P95,
}

impl BandLevel {
    /// Every indexed level.
    pub const ALL: [BandLevel; 4] = [BandLevel::P50, BandLevel::P80, BandLevel::P90, BandLevel::P95];

    /// The level as a probability.
    pub fn probability(self) -> f64 {
        match self {
            BandLevel::P50 => 0.5,
            BandLevel::P80 => 0.8,
            BandLevel::P90 => 0.9,
            BandLevel::P95 => 0.95,
        }
    }

    /// The indexed level equal to `probability` (within 1e-9), if any.
    pub fn from_probability(probability: f64) -> Option<Self> {
        Self::ALL.into_iter().find(|l| (l.probability() - probability).abs() < 1e-9)
    }

    /// One-byte code used in index keys.
    pub fn code(self) -> u8 {
        match self {
            BandLevel::P50 => 50,
            BandLevel::P80 => 80,
            BandLevel::P90 => 90,
            BandLevel::P95 => 95,
        }
    }
}

/// The materialised forecast of one part: the models' outlook (its trajectory left out: charts
/// compute it afresh) with the due quantiles whole, so any band level can be read. Stored in
/// the compact layout of [`super::forecast_layout`] (its serde form).
#[derive(Debug, Clone, PartialEq)]
pub struct StoredPart {
    /// Axle, 1 = front-most.
    pub axle_index: u32,
    /// Component.
    pub component: Component,
    /// The vehicle's own fit, when one could be made (kept for fleet pooling), without its
    /// coefficients ([`WearFit::without_coefficients`]: they are not stored).
    pub own_fit: Option<WearFit>,
    /// The outlook, thickness bands at 80 %.
    pub outlook: PartOutlook,
}

/// The materialised forecasts of one vehicle.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct VehicleForecasts {
    /// Fleet identifier.
    pub fleet_id: String,
    /// Vehicle identifier.
    pub vehicle_id: String,
    /// Vehicle class (for pooling and dashboards).
    pub vehicle_class: String,
    /// When computed, ms.
    pub computed_at_ms: i64,
    /// One entry per axle and component.
    pub parts: Vec<StoredPart>,
}

/// A position in the due index.
#[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord)]
pub struct DueCursor {
    /// Lower end of the due band at the index's level, ms.
    pub due_earliest_ms: i64,
    /// Vehicle identifier.
    pub vehicle_id: String,
    /// Axle.
    pub axle_index: u32,
    /// Component.
    pub component: Component,
}

/// A vehicle whose forecasts are stale, with the generation of the mark.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct StaleMark {
    /// Fleet identifier.
    pub fleet_id: String,
    /// Vehicle identifier.
    pub vehicle_id: String,
    /// Generation stamp of the mark.
    pub generation: u64,
}

/// Pooled wear-rate prior of one group (vehicle class, axle, component).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct GroupPrior {
    /// Vehicle class.
    pub vehicle_class: String,
    /// Axle.
    pub axle_index: u32,
    /// Component.
    pub component: Component,
    /// The population distribution of wear rates in the group.
    pub prior: WearPrior,
}

/// A fleet's pooled priors.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct FleetPriors {
    /// One entry per (class, axle, component) with enough vehicles.
    pub groups: Vec<GroupPrior>,
}

impl FleetPriors {
    /// The prior of one group.
    pub fn find(&self, vehicle_class: &str, axle_index: u32, component: Component) -> Option<&GroupPrior> {
        self.groups
            .iter()
            .find(|g| g.vehicle_class == vehicle_class && g.axle_index == axle_index && g.component == component)
    }
}

impl StoredPart {
    /// (earliest, median, latest) due day at a band level, days since epoch.
    pub fn due_band_days(&self, level: f64) -> Option<(f64, f64, f64)> {
        self.outlook.due.as_ref().map(|due| due.band(level))
    }

    /// Lower end of the due band at `level`, ms.
    pub fn due_earliest_ms(&self, level: f64) -> Option<i64> {
        self.due_band_days(level).map(|(low, _, _)| days_to_ms(low))
    }
}

/// Days since epoch (fractional) to ms, saturating far outside any calendar.
pub fn days_to_ms(days: f64) -> i64 {
    let ms = days * MS_PER_DAY as f64;
    if ms.is_nan() {
        0
    } else {
        ms.clamp(-8.0e15, 8.0e15) as i64
    }
}

/// One access token as stored: never the secret, only its SHA-256 (see `auth::tokens`).
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct TokenRecord {
    /// Identifier for listing and revoking (not a secret).
    pub token_id: String,
    /// SHA-256 of the secret.
    pub secret_sha256: [u8; 32],
    /// Fleet the token acts on; `None` for an operator token.
    pub fleet_id: Option<String>,
    /// What the token may do.
    pub role: crate::auth::roles::Role,
    /// Whose token it is, for people.
    pub label: String,
    /// Creation time, ms.
    pub created_at_ms: i64,
    /// token_id of the creator.
    pub created_by: String,
    /// Revocation time, ms; `None` while valid.
    pub revoked_at_ms: Option<i64>,
}

/// One audited write (made with a workshop, fleet-admin or operator token).
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct AuditRecord {
    /// When the write was acknowledged, ms.
    pub at_ms: i64,
    /// Fleet written to.
    pub fleet_id: String,
    /// token_id of the caller.
    pub token_id: String,
    /// Role of the caller.
    pub role: crate::auth::roles::Role,
    /// The RPC path without the leading slash.
    pub action: String,
    /// What was written, for people.
    pub subject: String,
}

/// Position in a fleet's audit trail: (time ms, sequence number).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub struct AuditCursor {
    /// Time of the entry, ms.
    pub at_ms: i64,
    /// Store-wide sequence number breaking ties.
    pub sequence: u64,
}
