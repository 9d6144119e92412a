//! Part names on the command line: the `--component` flag (pad, lining, rotor, drum) and the
//! plain-words name of a component on a given axle for tables and charts.

use brakeledger_proto::v1 as pb;

/// A component as named on the command line. `pad` and `lining` are the friction part;
/// `rotor` and `drum` the part it rubs on.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum PartArg {
    /// Pad of a disc brake, or lining of a drum brake.
    #[value(alias = "lining", alias = "friction")]
    Pad,
    /// Rotor of a disc brake, or drum of a drum brake.
    #[value(alias = "drum", alias = "disc")]
    Rotor,
}

impl PartArg {
    /// The wire component.
    pub fn component(self) -> pb::Component {
        match self {
            PartArg::Pad => pb::Component::Friction,
            PartArg::Rotor => pb::Component::Disc,
        }
    }
}

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

#[cfg(test)]
mod tests {
    use super::*;
    use clap::ValueEnum;

    #[test]
    fn trade_names_map_to_components_and_back() {
        for (word, component) in [("pad", pb::Component::Friction), ("lining", pb::Component::Friction), ("rotor", pb::Component::Disc), ("drum", pb::Component::Disc)] {
            let part = PartArg::from_str(word, true).expect("known name");
            assert_eq!(part.component(), component, "{word}");
        }
        assert!(PartArg::from_str("caliper", true).is_err());
        assert_eq!(part_name(pb::Component::Friction as i32, Some(pb::BrakeType::Drum)), "lining");
        assert_eq!(part_name(pb::Component::Disc as i32, Some(pb::BrakeType::Disc)), "rotor");
        assert_eq!(part_name(pb::Component::Disc as i32, None), "rotor/drum");
        assert_eq!(basis_name(pb::ForecastBasis::Combined as i32), "combined");
    }
}
