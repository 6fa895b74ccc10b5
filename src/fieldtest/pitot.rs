//! Flow from a pitot reading at an open hydrant outlet.

use crate::network::UnitSystem;

/// The constant of the pitot flow formula `Q = 29.83 c d^2 sqrt(p)` (Q in gpm, d in inches, p in psi),
/// as given in NFPA 291 and AWWA M17.
pub const PITOT_CONSTANT_US: f64 = 29.83;

/// The SI constant of the same formula, `Q = 1.1109e-3 c d^2 sqrt(p)` with Q in L/s, d in mm, p in kPa.
///
/// Derived from the US form by converting each quantity: Q in gpm = Q in L/s / 0.0630902 (exact gallon,
/// 3.785411784 L), d in in = d in mm / 25.4 (exact) and p in psi = p in kPa / 6.894757 (NIST SP 811), so
/// `K_si = 29.83 * 0.0630902 / 25.4^2 / sqrt(6.894757) = 1.11093e-3`. The orifice law
/// `Q = c (pi/4) d^2 sqrt(2 p / rho)` with water at 1000 kg/m^3 gives `(pi/4) sqrt(2) 1e-3 = 1.11072e-3`
/// in the same units: the trade constant is that law, rounded.
pub const PITOT_CONSTANT_SI: f64 = 1.110_93e-3;

/// kPa in one psi: one pound-force per square inch (NIST SP 811, Appendix B: 6.894757 kPa).
pub const KPA_PER_PSI: f64 = 6.894_757_293;

/// Outlet coefficient used when the sheet leaves it blank: a smooth, well-rounded outlet, the
/// commonest hydrant nozzle (NFPA 291).
pub const DEFAULT_OUTLET_COEFFICIENT: f64 = 0.90;

/// How a hydrant outlet meets the barrel, which sets its discharge coefficient.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum OutletShape {
    /// Smooth and well rounded: c = 0.90.
    SmoothRounded,
    /// Square and sharp at the barrel: c = 0.80.
    SquareSharp,
    /// Square and projecting into the barrel: c = 0.70.
    SquareProjecting,
}

impl OutletShape {
    /// Discharge coefficient of the outlet (NFPA 291, AWWA M17).
    pub fn coefficient(self) -> f64 {
        match self {
            Self::SmoothRounded => 0.90,
            Self::SquareSharp => 0.80,
            Self::SquareProjecting => 0.70,
        }
    }
}

/// Flow in gpm from a pitot reading: `Q = 29.83 c d^2 sqrt(p)` (NFPA 291), with `d` the outlet
/// diameter in inches, `p` the pitot (velocity) pressure in psi and `c` the outlet coefficient.
/// A negative pressure gives 0.
pub fn pitot_flow_gpm(coefficient: f64, outlet_in: f64, pitot_psi: f64) -> f64 {
    PITOT_CONSTANT_US * coefficient * outlet_in * outlet_in * pitot_psi.max(0.0).sqrt()
}

/// Flow in L/s from a pitot reading: `Q = 1.11093e-3 c d^2 sqrt(p)` with `d` in mm and `p` in kPa
/// (see [`PITOT_CONSTANT_SI`] for the derivation).
pub fn pitot_flow_lps(coefficient: f64, outlet_mm: f64, pitot_kpa: f64) -> f64 {
    PITOT_CONSTANT_SI * coefficient * outlet_mm * outlet_mm * pitot_kpa.max(0.0).sqrt()
}

/// Pitot flow in the sheet's units: gpm from in and psi, or L/s from mm and kPa.
pub fn pitot_flow(units: UnitSystem, coefficient: f64, outlet: f64, pitot: f64) -> f64 {
    match units {
        UnitSystem::Us => pitot_flow_gpm(coefficient, outlet, pitot),
        UnitSystem::Si => pitot_flow_lps(coefficient, outlet, pitot),
    }
}

/// The pitot pressure (sheet units) an outlet would show while passing `flow` (sheet units): the
/// pitot formula solved for `p`, `p = (Q / (K c d^2))^2`. Infinite for a zero outlet or coefficient.
pub fn pitot_pressure_for_flow(units: UnitSystem, coefficient: f64, outlet: f64, flow: f64) -> f64 {
    let constant = match units {
        UnitSystem::Us => PITOT_CONSTANT_US,
        UnitSystem::Si => PITOT_CONSTANT_SI,
    };
    let root = flow / (constant * coefficient * outlet * outlet);
    root * root
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::network::units::M3S_PER_GPM;

    #[test]
    fn pitot_by_hand() {
        // NFPA 291 formula, hand arithmetic: 2.5 in outlet, c = 0.90, 36 psi:
        // 29.83 * 0.90 * 6.25 * 6 = 1006.76 gpm.
        assert!((pitot_flow_gpm(0.90, 2.5, 36.0) - 1006.7625).abs() < 1e-9);
        // 4.5 in pumper outlet, c = 0.80, 16 psi: 29.83 * 0.8 * 20.25 * 4 = 1932.98 gpm.
        assert!((pitot_flow_gpm(0.80, 4.5, 16.0) - 1932.984).abs() < 1e-9);
        assert_eq!(pitot_flow_gpm(0.9, 2.5, -3.0), 0.0);
    }

    #[test]
    fn coefficient_table() {
        // NFPA 291 (and AWWA M17) outlet coefficients: 0.90 smooth and well rounded, 0.80 square and
        // sharp, 0.70 square and projecting into the barrel.
        assert_eq!(OutletShape::SmoothRounded.coefficient(), 0.90);
        assert_eq!(OutletShape::SquareSharp.coefficient(), 0.80);
        assert_eq!(OutletShape::SquareProjecting.coefficient(), 0.70);
        assert_eq!(
            DEFAULT_OUTLET_COEFFICIENT,
            OutletShape::SmoothRounded.coefficient()
        );
    }

    #[test]
    fn si_form_agrees_with_us_form() {
        // Unit definitions (NIST SP 811): 1 in = 25.4 mm, 1 psi = 6.894757 kPa, 1 gal = 3.785411784 L.
        for (c, d_in, p_psi) in [(0.9, 2.5, 36.0), (0.8, 4.5, 12.0), (0.7, 2.5, 55.0)] {
            let gpm = pitot_flow_gpm(c, d_in, p_psi);
            let lps = pitot_flow_lps(c, d_in * 25.4, p_psi * KPA_PER_PSI);
            let lps_from_us = gpm * M3S_PER_GPM * 1000.0;
            assert!(
                (lps - lps_from_us).abs() / lps_from_us < 1e-5,
                "{lps} vs {lps_from_us}"
            );
            assert!(
                (pitot_flow(UnitSystem::Si, c, d_in * 25.4, p_psi * KPA_PER_PSI) - lps).abs()
                    < 1e-12
            );
        }
    }

    #[test]
    fn si_constant_is_the_orifice_law() {
        // Orifice law Q = c A sqrt(2 p / rho) (any fluid-mechanics text, from memory), rho = 1000 kg/m^3:
        // 64 mm outlet, c = 0.9, 250 kPa -> 0.9 * pi/4 * 0.064^2 * sqrt(500) = 0.06475 m^3/s.
        let orifice_m3s =
            0.9 * std::f64::consts::FRAC_PI_4 * 0.064_f64.powi(2) * (500.0_f64).sqrt();
        let lps = pitot_flow_lps(0.9, 64.0, 250.0);
        // The trade constant rounds the law; they agree within 0.05 %.
        assert!(
            (lps / 1000.0 - orifice_m3s).abs() / orifice_m3s < 5e-4,
            "{lps}"
        );
    }

    #[test]
    fn pressure_for_flow_inverts_the_formula() {
        for units in [UnitSystem::Us, UnitSystem::Si] {
            let q = pitot_flow(units, 0.85, 63.5, 41.0);
            assert!((pitot_pressure_for_flow(units, 0.85, 63.5, q) - 41.0).abs() < 1e-9);
        }
    }
}
