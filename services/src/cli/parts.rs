//! Part names on the command line: the `--component` flag (pad, lining, rotor, drum); the
//! plain-words names of parts for tables and charts live in [`crate::part_names`] (shared with
//! the exports and the web page) and are re-exported here.

use brakeledger_proto::v1 as pb;

pub use crate::part_names::{basis_name, brake_type_of, part_name};

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
