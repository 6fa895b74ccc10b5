//! Unit systems of the files and the single internal system the core computes in.
//!
//! Internally every length, elevation and head is in metres, every diameter in metres and every flow in
//! cubic metres per second. Files and screens use the network's own system (`us` or `si`); conversion
//! happens only at the edges, through [`UnitSystem`].

use serde::{Deserialize, Serialize};

/// Metres in one foot (exact, international foot).
pub const M_PER_FT: f64 = 0.3048;
/// Metres in one inch (exact).
pub const M_PER_IN: f64 = 0.0254;
/// Cubic metres per second in one US gallon per minute: 3.785411784 L / 60 s (exact gallon).
pub const M3S_PER_GPM: f64 = 3.785_411_784e-3 / 60.0;
/// psi of pressure per foot of water head, as stated in the issue and used across the trade
/// (common practice, no source: 62.4 lb/ft^3 / 144 in^2/ft^2 = 0.4333, rounded in practice to 0.4335).
pub const PSI_PER_FT: f64 = 0.4335;
/// kPa of pressure per metre of water head: standard gravity times 1000 kg/m^3 (ISO 80000-3 g_n).
pub const KPA_PER_M: f64 = 9.80665;

/// A value in file units brought back from SI, as it was typed: rounded to 12 significant digits. The
/// round trip through SI leaves float noise in the last digits (26 psi comes back as 25.999999999999996);
/// 12 digits remove it and keep every digit anyone types a reading with.
pub fn as_typed(value: f64) -> f64 {
    if !value.is_finite() || value == 0.0 {
        return value;
    }
    format!("{value:.11e}").parse().unwrap_or(value)
}

/// The unit system a network file, a field sheet and the screens are written in.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "lowercase")]
pub enum UnitSystem {
    /// ft, in, gpm, psi.
    #[default]
    Us,
    /// m, mm, L/s, kPa.
    Si,
}

/// Cubic metres per second in one cubic metre per hour (exact).
pub const M3S_PER_M3H: f64 = 1.0 / 3600.0;
/// Cubic metres per second in one million US gallons per day: 1e6 x 3.785411784 L / 86 400 s (exact
/// gallon, NIST SP 811 Appendix B), 0.043812636 m^3/s.
pub const M3S_PER_MGD: f64 = 3.785_411_784e3 / 86_400.0;

/// The unit flows are written and shown in: the flow unit of the unit system (gpm in `us`, L/s in `si`)
/// unless a network file names another with `flow_unit`. Lengths, diameters and pressures, and the
/// Hazen-Williams formula the constant is written in, stay those of the [`UnitSystem`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FlowUnit {
    /// US gallons per minute.
    Gpm,
    /// Litres per second.
    Lps,
    /// Cubic metres per hour.
    M3h,
    /// Million US gallons per day.
    Mgd,
}

impl FlowUnit {
    /// Every flow unit, in the order messages list them.
    pub const ALL: [FlowUnit; 4] = [Self::Gpm, Self::Lps, Self::M3h, Self::Mgd];

    /// The flow unit of a unit system: gpm in `us`, L/s in `si`.
    pub fn of_system(units: UnitSystem) -> Self {
        match units {
            UnitSystem::Us => Self::Gpm,
            UnitSystem::Si => Self::Lps,
        }
    }

    /// Parses the `flow_unit` key of a network file.
    pub fn parse(text: &str) -> Option<Self> {
        Self::ALL.into_iter().find(|unit| unit.key() == text)
    }

    /// The key as written in files (`gpm`, `lps`, `m3h`, `mgd`).
    pub fn key(self) -> &'static str {
        match self {
            Self::Gpm => "gpm",
            Self::Lps => "lps",
            Self::M3h => "m3h",
            Self::Mgd => "mgd",
        }
    }

    /// The label shown beside numbers (`gpm`, `L/s`, `m3/h`, `MGD`).
    pub fn label(self) -> &'static str {
        match self {
            Self::Gpm => "gpm",
            Self::Lps => "L/s",
            Self::M3h => "m3/h",
            Self::Mgd => "MGD",
        }
    }

    /// m^3/s in one unit of this flow unit.
    pub fn m3s_per_unit(self) -> f64 {
        match self {
            Self::Gpm => M3S_PER_GPM,
            Self::Lps => 1e-3,
            Self::M3h => M3S_PER_M3H,
            Self::Mgd => M3S_PER_MGD,
        }
    }

    /// A flow in this unit, to m^3/s.
    pub fn to_m3s(self, value: f64) -> f64 {
        value * self.m3s_per_unit()
    }

    /// m^3/s to this unit.
    pub fn from_m3s(self, m3s: f64) -> f64 {
        m3s / self.m3s_per_unit()
    }
}

/// The `units` object of every `--json` report: the system's key and the label of each quantity, so
/// that every number of a report is read against one of these five names (fields in alphabetical
/// order, the order every JSON report prints its keys in).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub struct UnitLabels {
    /// Pipe diameters (`in` or `mm`).
    pub diameter: &'static str,
    /// Flows (`gpm`, `L/s`, `m3/h` or `MGD`).
    pub flow: &'static str,
    /// Lengths, elevations and heads (`ft` or `m`).
    pub length: &'static str,
    /// Pressures (`psi` or `kPa`).
    pub pressure: &'static str,
    /// `us` or `si`.
    pub system: &'static str,
}

impl UnitSystem {
    /// The labels of this system, as the `units` object of JSON reports.
    pub fn labels(self) -> UnitLabels {
        UnitLabels {
            diameter: self.diameter_label(),
            flow: self.flow_label(),
            length: self.length_label(),
            pressure: self.pressure_label(),
            system: self.key(),
        }
    }

    /// The labels of this system with flows in `flow` (a network's `flow_unit`).
    pub fn labels_with_flow(self, flow: FlowUnit) -> UnitLabels {
        UnitLabels {
            flow: flow.label(),
            ..self.labels()
        }
    }

    /// Parses the `units` key of a network file.
    pub fn parse(text: &str) -> Option<Self> {
        match text {
            "us" => Some(Self::Us),
            "si" => Some(Self::Si),
            _ => None,
        }
    }

    /// The key as written in files.
    pub fn key(self) -> &'static str {
        match self {
            Self::Us => "us",
            Self::Si => "si",
        }
    }

    /// Label of lengths, elevations and heads (`ft` or `m`).
    pub fn length_label(self) -> &'static str {
        match self {
            Self::Us => "ft",
            Self::Si => "m",
        }
    }

    /// Label of pipe and outlet diameters (`in` or `mm`).
    pub fn diameter_label(self) -> &'static str {
        match self {
            Self::Us => "in",
            Self::Si => "mm",
        }
    }

    /// Label of flows (`gpm` or `L/s`).
    pub fn flow_label(self) -> &'static str {
        match self {
            Self::Us => "gpm",
            Self::Si => "L/s",
        }
    }

    /// Label of pressures (`psi` or `kPa`).
    pub fn pressure_label(self) -> &'static str {
        match self {
            Self::Us => "psi",
            Self::Si => "kPa",
        }
    }

    /// A length, elevation or head in file units, to metres.
    pub fn length_to_m(self, value: f64) -> f64 {
        match self {
            Self::Us => value * M_PER_FT,
            Self::Si => value,
        }
    }

    /// Metres to file length units.
    pub fn length_from_m(self, metres: f64) -> f64 {
        match self {
            Self::Us => metres / M_PER_FT,
            Self::Si => metres,
        }
    }

    /// A diameter in file units (in or mm), to metres.
    pub fn diameter_to_m(self, value: f64) -> f64 {
        match self {
            Self::Us => value * M_PER_IN,
            Self::Si => value / 1000.0,
        }
    }

    /// Metres to file diameter units.
    pub fn diameter_from_m(self, metres: f64) -> f64 {
        match self {
            Self::Us => metres / M_PER_IN,
            Self::Si => metres * 1000.0,
        }
    }

    /// A flow in file units (gpm or L/s), to m^3/s.
    pub fn flow_to_m3s(self, value: f64) -> f64 {
        match self {
            Self::Us => value * M3S_PER_GPM,
            Self::Si => value / 1000.0,
        }
    }

    /// m^3/s to file flow units.
    pub fn flow_from_m3s(self, m3s: f64) -> f64 {
        match self {
            Self::Us => m3s / M3S_PER_GPM,
            Self::Si => m3s * 1000.0,
        }
    }

    /// Pressure in file units (psi or kPa) of a water column of `head_m` metres.
    pub fn pressure_from_head_m(self, head_m: f64) -> f64 {
        match self {
            Self::Us => head_m / M_PER_FT * PSI_PER_FT,
            Self::Si => head_m * KPA_PER_M,
        }
    }

    /// Water-column height in metres of a pressure in file units (psi or kPa).
    pub fn pressure_to_head_m(self, pressure: f64) -> f64 {
        match self {
            Self::Us => pressure / PSI_PER_FT * M_PER_FT,
            Self::Si => pressure / KPA_PER_M,
        }
    }

    /// d(pressure in file units) / d(head in metres): the constant factor of [`Self::pressure_from_head_m`].
    pub fn pressure_per_head_m(self) -> f64 {
        self.pressure_from_head_m(1.0)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn conversions_round_trip() {
        for units in [UnitSystem::Us, UnitSystem::Si] {
            for v in [0.0, 1.0, 123.456, -7.5] {
                assert!((units.length_from_m(units.length_to_m(v)) - v).abs() < 1e-12);
                assert!((units.diameter_from_m(units.diameter_to_m(v)) - v).abs() < 1e-12);
                assert!((units.flow_from_m3s(units.flow_to_m3s(v)) - v).abs() < 1e-9);
                assert!(
                    (units.pressure_to_head_m(units.pressure_from_head_m(v)) - v).abs() < 1e-12
                );
            }
        }
    }

    #[test]
    fn one_thousand_gpm_in_litres_per_second() {
        // NIST SP 811 Appendix B: 1 gal (US) = 3.785412 L, so 1000 gpm = 63.09 L/s.
        let lps = UnitSystem::Si.flow_from_m3s(UnitSystem::Us.flow_to_m3s(1000.0));
        assert!((lps - 63.0902).abs() < 1e-3, "{lps}");
    }

    #[test]
    fn flow_units_against_their_definitions() {
        // NIST SP 811 Appendix B: 1 gal (US) = 3.785412e-3 m^3; 1 MGD = 1e6 gal / 86 400 s
        // = 43.81 L/s = 694.4 gpm (1e6 / 1440).
        assert!((FlowUnit::Mgd.to_m3s(1.0) - 0.043_812_636).abs() < 1e-9);
        let gpm = FlowUnit::Gpm.from_m3s(FlowUnit::Mgd.to_m3s(1.0));
        assert!((gpm - 1e6 / 1440.0).abs() < 1e-9, "{gpm}");
        // 1 m^3/h = 1000 L / 3600 s = 0.2778 L/s (definition of the litre and the hour).
        let lps = FlowUnit::Lps.from_m3s(FlowUnit::M3h.to_m3s(1.0));
        assert!((lps - 1.0 / 3.6).abs() < 1e-12, "{lps}");
        for unit in FlowUnit::ALL {
            assert_eq!(FlowUnit::parse(unit.key()), Some(unit));
            assert!((unit.from_m3s(unit.to_m3s(12.5)) - 12.5).abs() < 1e-12);
        }
        assert_eq!(FlowUnit::parse("m3/h"), None);
        for units in [UnitSystem::Us, UnitSystem::Si] {
            let own = FlowUnit::of_system(units);
            assert_eq!(own.label(), units.flow_label());
            assert_eq!(own.to_m3s(7.0), units.flow_to_m3s(7.0));
        }
    }

    #[test]
    fn water_column_pressures() {
        // 2.31 ft of water per psi (common practice, no source), i.e. 1/0.4335 = 2.307 ft.
        let psi = UnitSystem::Us.pressure_from_head_m(2.31 * M_PER_FT);
        assert!((psi - 1.0).abs() < 2e-3, "{psi}");
        // 10 m of water is 98.07 kPa (standard gravity, ISO 80000-3).
        assert!((UnitSystem::Si.pressure_from_head_m(10.0) - 98.0665).abs() < 1e-9);
    }
}
