//! Domain types shared by every model and by the service: vehicles, axle brakes, components,
//! and the validity rules of a vehicle description.
//!
//! Units are in the names: `_mm` millimetres, `_kg` kilograms, `_j` joules, `_mj` megajoules.
//! Values of these types are checked once at the boundary ([`VehicleSpec::validate`]); code
//! past that point relies on them being valid.

use serde::{Deserialize, Serialize};

/// How the brake on one axle is built.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
pub enum BrakeType {
    /// Pads clamp a rotor.
    Disc,
    /// Shoes with linings press on the inside of a drum.
    Drum,
}

/// Which wearing part of an axle's brake.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
pub enum Component {
    /// Pad (disc brake) or lining (drum brake).
    Friction,
    /// Rotor (disc brake) or drum wall (drum brake).
    Disc,
}

impl Component {
    /// Both components, friction first.
    pub const ALL: [Component; 2] = [Component::Friction, Component::Disc];

    /// Plain-words name of the part for a given brake type ("pad", "rotor", "lining", "drum").
    pub fn part_name(self, brake: BrakeType) -> &'static str {
        match (self, brake) {
            (Component::Friction, BrakeType::Disc) => "pad",
            (Component::Friction, BrakeType::Drum) => "lining",
            (Component::Disc, BrakeType::Disc) => "rotor",
            (Component::Disc, BrakeType::Drum) => "drum",
        }
    }
}

/// The brake on one axle of a vehicle.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AxleBrake {
    /// Axle position, 1 = front-most.
    pub axle_index: u32,
    /// Disc or drum.
    pub brake_type: BrakeType,
    /// Fraction (0..1) of friction energy taken by this axle when a trip gives no split.
    pub energy_share: f64,
    /// New pad or lining thickness, mm.
    pub friction_new_mm: f64,
    /// Minimum pad or lining thickness, mm.
    pub friction_min_mm: f64,
    /// New rotor thickness (disc) or drum wall thickness (drum), mm.
    pub disc_new_mm: f64,
    /// Minimum rotor thickness, or drum wall left at the maximum inner diameter, mm.
    pub disc_min_mm: f64,
}

impl AxleBrake {
    /// New thickness of a component, mm.
    pub fn new_mm(&self, component: Component) -> f64 {
        match component {
            Component::Friction => self.friction_new_mm,
            Component::Disc => self.disc_new_mm,
        }
    }

    /// Minimum thickness of a component, mm.
    pub fn min_mm(&self, component: Component) -> f64 {
        match component {
            Component::Friction => self.friction_min_mm,
            Component::Disc => self.disc_min_mm,
        }
    }
}

/// A vehicle as far as the models need it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct VehicleSpec {
    /// Free-text class used to pool wear rates ("city-bus").
    pub vehicle_class: String,
    /// Typical operating mass, kg.
    pub mass_kg: f64,
    /// Braked axles, front to rear, `axle_index` 1..=n.
    pub axles: Vec<AxleBrake>,
}

/// One offending field of an input record, with the reason in plain words.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct FieldViolation {
    /// Field path as the caller names it ("axles[1].energy_share").
    pub field: String,
    /// Why the value is refused.
    pub reason: String,
}

impl FieldViolation {
    /// A violation of `field` for `reason`.
    pub fn new(field: impl Into<String>, reason: impl Into<String>) -> Self {
        Self { field: field.into(), reason: reason.into() }
    }
}

/// Largest number of braked axles a vehicle may declare.
pub const MAX_AXLES: usize = 10;
/// Heaviest plausible road vehicle, kg (a generous bound above heavy-haulage combinations).
pub const MAX_MASS_KG: f64 = 250_000.0;

/// Pushes a violation when `value` is not finite or not strictly positive.
fn check_positive(out: &mut Vec<FieldViolation>, field: &str, value: f64) {
    if !value.is_finite() {
        out.push(FieldViolation::new(field, "must be a finite number"));
    } else if value <= 0.0 {
        out.push(FieldViolation::new(field, "must be greater than 0"));
    }
}

impl VehicleSpec {
    /// Checks the description; returns every problem found, with field paths relative to the
    /// vehicle message (`mass_kg`, `axles[0].energy_share`, ...).
    pub fn validate(&self) -> Result<(), Vec<FieldViolation>> {
        let mut out = Vec::new();
        check_positive(&mut out, "mass_kg", self.mass_kg);
        if self.mass_kg.is_finite() && self.mass_kg > MAX_MASS_KG {
            out.push(FieldViolation::new("mass_kg", format!("must be at most {MAX_MASS_KG} kg")));
        }
        if self.axles.is_empty() {
            out.push(FieldViolation::new("axles", "a vehicle needs at least one braked axle"));
        }
        if self.axles.len() > MAX_AXLES {
            out.push(FieldViolation::new("axles", format!("at most {MAX_AXLES} axles")));
        }
        let mut share_sum = 0.0;
        for (i, axle) in self.axles.iter().enumerate() {
            let f = |name: &str| format!("axles[{i}].{name}");
            if axle.axle_index as usize != i + 1 {
                out.push(FieldViolation::new(
                    f("axle_index"),
                    format!("axles must be numbered 1, 2, ... front to rear; expected {}", i + 1),
                ));
            }
            if !(axle.energy_share.is_finite() && (0.0..=1.0).contains(&axle.energy_share)) {
                out.push(FieldViolation::new(f("energy_share"), "must be between 0 and 1"));
            } else {
                share_sum += axle.energy_share;
            }
            for (name, new_mm, min_mm) in [
                ("friction", axle.friction_new_mm, axle.friction_min_mm),
                ("disc", axle.disc_new_mm, axle.disc_min_mm),
            ] {
                check_positive(&mut out, &f(&format!("{name}_new_mm")), new_mm);
                if !min_mm.is_finite() || min_mm < 0.0 {
                    out.push(FieldViolation::new(f(&format!("{name}_min_mm")), "must be a finite number >= 0"));
                } else if new_mm.is_finite() && min_mm >= new_mm {
                    out.push(FieldViolation::new(
                        f(&format!("{name}_min_mm")),
                        format!("must be below {name}_new_mm ({new_mm} mm)"),
                    ));
                }
            }
        }
        if !self.axles.is_empty() && (share_sum - 1.0).abs() > 1e-3 {
            out.push(FieldViolation::new(
                "axles",
                format!("energy_share values must sum to 1 (they sum to {share_sum:.4})"),
            ));
        }
        if out.is_empty() {
            Ok(())
        } else {
            Err(out)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn two_axle() -> VehicleSpec {
        let axle = |i, share| AxleBrake {
            axle_index: i,
            brake_type: BrakeType::Disc,
            energy_share: share,
            friction_new_mm: 20.0,
            friction_min_mm: 3.0,
            disc_new_mm: 45.0,
            disc_min_mm: 39.0,
        };
        VehicleSpec { vehicle_class: "test".into(), mass_kg: 12_000.0, axles: vec![axle(1, 0.6), axle(2, 0.4)] }
    }

    #[test]
    fn valid_vehicle_passes() {
        assert_eq!(two_axle().validate(), Ok(()));
    }

    #[test]
    fn every_problem_is_reported_with_its_field() {
        let mut v = two_axle();
        v.mass_kg = f64::NAN;
        v.axles[1].axle_index = 5;
        v.axles[1].energy_share = 0.5;
        v.axles[0].disc_min_mm = 50.0;
        let errors = v.validate().expect_err("invalid");
        let fields: Vec<_> = errors.iter().map(|e| e.field.as_str()).collect();
        assert_eq!(fields, vec!["mass_kg", "axles[0].disc_min_mm", "axles[1].axle_index", "axles"]);
    }
}
