//! How parts and forecast bases are named for people, from wire values: pad, lining, rotor or
//! drum as the trade names the part on its axle, and where a wear rate came from. Shared by the
//! command line, the exports and the web page.

use brakeledger_proto::v1 as pb;

/// The name of `component` for a brake type: pad, lining, rotor or drum. An unknown brake
/// type gives the generic names "pad/lining" and "rotor/drum".
pub fn part_name(component: i32, brake_type: Option<pb::BrakeType>) -> &'static str {
    match (pb::Component::try_from(component), brake_type) {
        (Ok(pb::Component::Friction), Some(pb::BrakeType::Disc)) => "pad",
        (Ok(pb::Component::Friction), Some(pb::BrakeType::Drum)) => "lining",
        (Ok(pb::Component::Disc), Some(pb::BrakeType::Disc)) => "rotor",
        (Ok(pb::Component::Disc), Some(pb::BrakeType::Drum)) => "drum",
        (Ok(pb::Component::Friction), _) => "pad/lining",
        (Ok(pb::Component::Disc), _) => "rotor/drum",
        _ => "?",
    }
}

/// The brake type of an axle of a vehicle, when the vehicle is known.
pub fn brake_type_of(vehicle: Option<&pb::Vehicle>, axle_index: u32) -> Option<pb::BrakeType> {
    vehicle?
        .axles
        .iter()
        .find(|a| a.axle_index == axle_index)
        .and_then(|a| pb::BrakeType::try_from(a.brake_type).ok())
        .filter(|t| *t != pb::BrakeType::Unspecified)
}

/// Plain words for where a forecast's wear rate came from.
pub fn basis_name(basis: i32) -> &'static str {
    match pb::ForecastBasis::try_from(basis) {
        Ok(pb::ForecastBasis::VehicleData) => "own data",
        Ok(pb::ForecastBasis::FleetPrior) => "fleet rate",
        Ok(pb::ForecastBasis::Combined) => "combined",
        _ => "-",
    }
}

/// Vehicles by identifier, for naming their parts.
pub type VehicleIndex = std::collections::HashMap<String, pb::Vehicle>;

/// The name of a part of a vehicle in `vehicles` (the generic name when it is not there).
pub fn vehicle_part_name(vehicles: &VehicleIndex, vehicle_id: &str, axle_index: u32, component: i32) -> &'static str {
    part_name(component, brake_type_of(vehicles.get(vehicle_id), axle_index))
}
