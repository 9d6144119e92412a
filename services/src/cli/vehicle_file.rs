//! `brakeledger add-vehicle`: vehicles described in a JSON or TOML file (one vehicle, or a
//! list under `vehicles`), registered with UpsertVehicle. The keys are the contract's field
//! names, with `brake_type` written as `disc` or `drum`.

use std::io::Write;
use std::path::{Path, PathBuf};

use anyhow::Context;
use brakeledger_proto::v1 as pb;
use serde::{Deserialize, Serialize};

use crate::cli::client::{explain, Connection, ServerTarget};

/// Longer description of `add-vehicle`.
pub const ADD_VEHICLE_LONG_ABOUT: &str = "\
Register vehicles described in a JSON or TOML file, or replace them when already registered.
The file holds one vehicle, or several as a list named `vehicles` (a JSON array works too).
Keys: fleet_id (or --fleet), vehicle_id, vin (optional, 17 characters), vehicle_class, mass_kg,
and axles, front first, each with brake_type (disc or drum), energy_share (0..1, summing to 1),
friction_new_mm and friction_min_mm (pad or lining, mm), disc_new_mm and disc_min_mm (rotor,
or drum wall, mm). axle_index may be left out: axles are numbered 1, 2, ... in file order.";

/// Examples of `add-vehicle`.
pub const ADD_VEHICLE_EXAMPLES: &str = "\
Examples:
  brakeledger add-vehicle bus-17.toml
  brakeledger add-vehicle --fleet north vehicles.json

bus-17.toml:
  fleet_id = \"north\"
  vehicle_id = \"bus-17\"
  vehicle_class = \"city-bus\"
  mass_kg = 16500

  [[axles]]
  brake_type = \"disc\"
  energy_share = 0.6
  friction_new_mm = 22
  friction_min_mm = 3
  disc_new_mm = 45
  disc_min_mm = 39

  [[axles]]
  brake_type = \"drum\"
  energy_share = 0.4
  friction_new_mm = 18
  friction_min_mm = 5
  disc_new_mm = 16
  disc_min_mm = 12.5
";

/// Flags of `add-vehicle`.
#[derive(Debug, clap::Args)]
pub struct AddVehicleArgs {
    /// JSON (.json) or TOML (.toml) file.
    pub file: PathBuf,
    /// Fleet of vehicles whose fleet_id is absent.
    #[arg(long)]
    pub fleet: Option<String>,
}

/// One vehicle as written in a file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct VehicleEntry {
    /// Fleet identifier; `--fleet` when absent.
    #[serde(default)]
    pub fleet_id: Option<String>,
    /// Vehicle identifier.
    pub vehicle_id: String,
    /// VIN (ISO 3779), when known.
    #[serde(default)]
    pub vin: Option<String>,
    /// Class used to pool wear rates.
    #[serde(default)]
    pub vehicle_class: String,
    /// Typical operating mass, kg.
    pub mass_kg: f64,
    /// Braked axles, front first.
    pub axles: Vec<AxleEntry>,
}

/// One axle's brake as written in a file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AxleEntry {
    /// Axle position, 1 = front-most; by default the position in the list.
    #[serde(default)]
    pub axle_index: Option<u32>,
    /// `disc` or `drum`.
    pub brake_type: BrakeKind,
    /// Share of friction energy, 0..1.
    pub energy_share: f64,
    /// New pad or lining thickness, mm.
    pub friction_new_mm: f64,
    /// Minimum pad or lining thickness, mm.
    pub friction_min_mm: f64,
    /// New rotor thickness or drum wall, mm.
    pub disc_new_mm: f64,
    /// Minimum rotor thickness or drum wall, mm.
    pub disc_min_mm: f64,
}

/// Brake type as written in a file.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum BrakeKind {
    /// Pads and rotor.
    Disc,
    /// Linings and drum.
    Drum,
}

impl VehicleEntry {
    /// The wire message, with `default_fleet` where the entry names no fleet.
    pub fn into_wire(self, default_fleet: Option<&str>) -> anyhow::Result<pb::Vehicle> {
        let fleet_id = match self.fleet_id.or_else(|| default_fleet.map(str::to_owned)) {
            Some(f) => f,
            None => anyhow::bail!("vehicle '{}' has no fleet_id and no --fleet was given", self.vehicle_id),
        };
        Ok(pb::Vehicle {
            fleet_id,
            vehicle_id: self.vehicle_id,
            vin: self.vin,
            vehicle_class: self.vehicle_class,
            mass_kg: self.mass_kg,
            axles: self
                .axles
                .into_iter()
                .enumerate()
                .map(|(i, a)| pb::AxleBrake {
                    axle_index: a.axle_index.unwrap_or(i as u32 + 1),
                    brake_type: match a.brake_type {
                        BrakeKind::Disc => pb::BrakeType::Disc,
                        BrakeKind::Drum => pb::BrakeType::Drum,
                    } as i32,
                    energy_share: a.energy_share,
                    friction_new_mm: a.friction_new_mm,
                    friction_min_mm: a.friction_min_mm,
                    disc_new_mm: a.disc_new_mm,
                    disc_min_mm: a.disc_min_mm,
                })
                .collect(),
        })
    }
}

/// Reads the vehicles of a file's text; `path` gives the format (`.toml`, else JSON).
pub fn parse_vehicles(path: &Path, text: &str) -> anyhow::Result<Vec<VehicleEntry>> {
    let is_toml = path.extension().and_then(|e| e.to_str()).is_some_and(|e| e.eq_ignore_ascii_case("toml"));
    if is_toml {
        let value: toml::Table = toml::from_str(text).context("not valid TOML")?;
        match value.get("vehicles") {
            Some(toml::Value::Array(list)) => list
                .iter()
                .enumerate()
                .map(|(i, v)| v.clone().try_into::<VehicleEntry>().with_context(|| format!("vehicles[{i}]")))
                .collect(),
            Some(_) => anyhow::bail!("`vehicles` must be a list of tables ([[vehicles]])"),
            None => Ok(vec![toml::Value::Table(value).try_into::<VehicleEntry>().context("the vehicle")?]),
        }
    } else {
        let value: serde_json::Value = serde_json::from_str(text).context("not valid JSON")?;
        let list = match value {
            serde_json::Value::Array(list) => list,
            serde_json::Value::Object(mut object) if object.contains_key("vehicles") => match object.remove("vehicles") {
                Some(serde_json::Value::Array(list)) => list,
                _ => anyhow::bail!("`vehicles` must be an array"),
            },
            single => return Ok(vec![serde_json::from_value(single).context("the vehicle")?]),
        };
        list.into_iter()
            .enumerate()
            .map(|(i, v)| serde_json::from_value::<VehicleEntry>(v).with_context(|| format!("vehicles[{i}]")))
            .collect()
    }
}

/// Runs `add-vehicle`.
pub async fn add_vehicle(server: &ServerTarget, args: &AddVehicleArgs, out: &mut impl Write) -> anyhow::Result<()> {
    let text = std::fs::read_to_string(&args.file).with_context(|| format!("reading {}", args.file.display()))?;
    let entries = parse_vehicles(&args.file, &text).with_context(|| format!("reading vehicles from {}", args.file.display()))?;
    let vehicles = entries
        .into_iter()
        .map(|e| e.into_wire(args.fleet.as_deref()))
        .collect::<anyhow::Result<Vec<_>>>()
        .with_context(|| format!("reading vehicles from {}", args.file.display()))?;
    let mut connection = Connection::open(server).await?;
    for vehicle in vehicles {
        let label = format!("vehicle '{}' of fleet '{}'", vehicle.vehicle_id, vehicle.fleet_id);
        let response = connection
            .fleet
            .upsert_vehicle(pb::UpsertVehicleRequest { vehicle: Some(vehicle) })
            .await
            .map_err(|s| explain(s, &format!("registering {label}")))?
            .into_inner();
        let axles = response.vehicle.map(|v| v.axles.len()).unwrap_or(0);
        let what = if response.created { "registered" } else { "replaced" };
        writeln!(out, "{label}: {what}, {axles} braked axle(s)")?;
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_help_example_is_a_valid_toml_vehicle() {
        let example: String = ADD_VEHICLE_EXAMPLES
            .split_once("bus-17.toml:\n")
            .map(|(_, toml)| toml.lines().map(|l| l.strip_prefix("  ").unwrap_or(l)).collect::<Vec<_>>().join("\n"))
            .unwrap_or_default();
        let entries = parse_vehicles(Path::new("bus-17.toml"), &example).expect("example parses");
        let vehicle = entries.into_iter().next().map(|e| e.into_wire(None)).transpose().expect("wire").expect("one vehicle");
        assert_eq!((vehicle.fleet_id.as_str(), vehicle.vehicle_id.as_str()), ("north", "bus-17"));
        assert_eq!(vehicle.axles.len(), 2);
        assert_eq!(vehicle.axles[1].axle_index, 2);
        assert_eq!(vehicle.axles[1].brake_type, pb::BrakeType::Drum as i32);
        assert_eq!(vehicle.axles[1].disc_min_mm, 12.5);
    }

    #[test]
    fn json_lists_and_fleet_flag() {
        let text = r#"{"vehicles": [
            {"vehicle_id": "v1", "mass_kg": 3500, "axles": [{"brake_type": "disc", "energy_share": 1, "friction_new_mm": 12, "friction_min_mm": 2, "disc_new_mm": 28, "disc_min_mm": 26}]},
            {"fleet_id": "east", "vehicle_id": "v2", "vin": "ZZZEXAMPLE0000001", "mass_kg": 3500, "axles": []}
        ]}"#;
        let entries = parse_vehicles(Path::new("v.json"), text).expect("parses");
        let wire: Vec<pb::Vehicle> = entries.into_iter().map(|e| e.into_wire(Some("west")).expect("fleet")).collect();
        assert_eq!(wire[0].fleet_id, "west");
        assert_eq!(wire[1].fleet_id, "east", "the file's fleet wins over --fleet");
        assert_eq!(wire[1].vin.as_deref(), Some("ZZZEXAMPLE0000001"));
    }

    #[test]
    fn mistakes_name_the_entry_and_the_key() {
        let text = r#"[{"vehicle_id": "v1", "mass_kg": 3500, "axles": []}, {"vehicle_id": "v2", "mas_kg": 1, "axles": []}]"#;
        let error = parse_vehicles(Path::new("v.json"), text).expect_err("typo");
        let message = format!("{error:#}");
        assert!(message.contains("vehicles[1]") && message.contains("unknown field `mas_kg`"), "{message}");

        let bad_brake = "vehicle_id = \"x\"\nmass_kg = 1\n[[axles]]\nbrake_type = \"band\"\nenergy_share = 1\nfriction_new_mm = 1\nfriction_min_mm = 1\ndisc_new_mm = 1\ndisc_min_mm = 1\n";
        let message = format!("{:#}", parse_vehicles(Path::new("x.toml"), bad_brake).expect_err("band brake"));
        assert!(message.contains("band"), "{message}");

        let no_fleet = parse_vehicles(Path::new("x.json"), r#"{"vehicle_id": "x", "mass_kg": 1, "axles": []}"#).expect("parses");
        let message = no_fleet.into_iter().map(|e| e.into_wire(None)).next().map(|r| r.expect_err("no fleet").to_string()).unwrap_or_default();
        assert!(message.contains("no fleet_id and no --fleet"), "{message}");
    }
}
