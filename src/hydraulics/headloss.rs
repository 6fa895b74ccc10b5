//! The Hazen-Williams head-loss law.
//!
//! hf = K L Q|Q|^0.852 / (C^1.852 D^4.87), with K = 10.44 for L in ft, Q in gpm, D in inches and
//! K = 10.67 for L in m, Q in m^3/s, D in m (the constants stated in the reference manuals of the trade;
//! the two are the same law to within 0.1 %). The core works in SI, so a US network's constant is
//! converted into SI units once here; each network keeps the exact constant of its own unit system.

use crate::network::UnitSystem;
use crate::network::units::{M_PER_IN, M3S_PER_GPM};

/// Flow exponent of Hazen-Williams.
pub const HW_FLOW_EXPONENT: f64 = 1.852;
/// Diameter exponent of Hazen-Williams.
pub const HW_DIAMETER_EXPONENT: f64 = 4.87;
/// K for L in ft, Q in gpm, D in inches.
pub const HW_K_US: f64 = 10.44;
/// K for L in m, Q in m^3/s, D in m.
pub const HW_K_SI: f64 = 10.67;

/// Hazen-Williams with the constant of one unit system, evaluated in SI.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct HazenWilliams {
    /// K such that hf_m = K L_m q_m3s^1.852 / (C^1.852 D_m^4.87).
    k_si: f64,
}

impl HazenWilliams {
    /// The law with the constant of `units` (10.44 in us, 10.67 in si), converted to SI.
    pub fn for_units(units: UnitSystem) -> Self {
        let k_si = match units {
            // hf and L are both lengths, so only Q and D need converting.
            UnitSystem::Us => {
                HW_K_US * M3S_PER_GPM.powf(-HW_FLOW_EXPONENT) * M_PER_IN.powf(HW_DIAMETER_EXPONENT)
            }
            UnitSystem::Si => HW_K_SI,
        };
        Self { k_si }
    }

    /// Resistance r of a pipe, so that hf_m = r q|q|^0.852 with q in m^3/s.
    pub fn resistance(&self, length_m: f64, diameter_m: f64, c_factor: f64) -> f64 {
        self.k_si * length_m
            / (c_factor.powf(HW_FLOW_EXPONENT) * diameter_m.powf(HW_DIAMETER_EXPONENT))
    }

    /// Head loss in metres over a pipe of resistance `r` carrying `q_m3s` (signed: positive in the
    /// pipe's direction).
    pub fn head_loss_m(r: f64, q_m3s: f64) -> f64 {
        r * q_m3s * q_m3s.abs().powf(HW_FLOW_EXPONENT - 1.0)
    }

    /// Head loss and its slope d(head loss)/dq together, with one power evaluation:
    /// (r q|q|^0.852, 1.852 r |q|^0.852).
    pub fn head_loss_and_slope(r: f64, q_m3s: f64) -> (f64, f64) {
        let scaled = r * q_m3s.abs().powf(HW_FLOW_EXPONENT - 1.0);
        (scaled * q_m3s, HW_FLOW_EXPONENT * scaled)
    }

    /// Flow in m^3/s that loses `head_loss_m` over resistance `r` (the inverse law, signed).
    pub fn flow_for_head_loss(r: f64, head_loss_m: f64) -> f64 {
        head_loss_m.signum() * (head_loss_m.abs() / r).powf(1.0 / HW_FLOW_EXPONENT)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::network::units::M_PER_FT;

    fn head_loss_us_ft(length_ft: f64, d_in: f64, c: f64, q_gpm: f64) -> f64 {
        let units = UnitSystem::Us;
        let law = HazenWilliams::for_units(units);
        let r = law.resistance(units.length_to_m(length_ft), units.diameter_to_m(d_in), c);
        HazenWilliams::head_loss_m(r, units.flow_to_m3s(q_gpm)) / M_PER_FT
    }

    #[test]
    fn us_form_matches_the_stated_formula() {
        // The formula evaluated directly: 10.44 * 1000 * 500^1.852 / (100^1.852 * 8^4.87).
        let direct = 10.44 * 1000.0 * 500f64.powf(1.852) / (100f64.powf(1.852) * 8f64.powf(4.87));
        let ours = head_loss_us_ft(1000.0, 8.0, 100.0, 500.0);
        assert!((ours - direct).abs() / direct < 1e-12, "{ours} vs {direct}");
    }

    #[test]
    fn us_form_agrees_with_the_sprinkler_standard_form() {
        // NFPA 13 (hydraulic calculation procedures): p = 4.52 Q^1.85 / (C^1.85 d^4.87) psi per foot,
        // Q in gpm, d in inches. Converted to feet of water with 0.4335 psi/ft it is the same law to
        // within one percent (its exponent is rounded to 1.85, which moves Q^n / C^n by up to 0.8 %).
        for (d_in, c, q_gpm) in [
            (8.0, 100.0, 500.0),
            (6.0, 120.0, 750.0),
            (12.0, 130.0, 2000.0),
        ] {
            let nfpa13_ft_per_ft = 4.52 * f64::powf(q_gpm, 1.85)
                / (f64::powf(c, 1.85) * f64::powf(d_in, 4.87))
                / 0.4335;
            let ours = head_loss_us_ft(1.0, d_in, c, q_gpm);
            assert!(
                (ours / nfpa13_ft_per_ft - 1.0).abs() < 1e-2,
                "{ours} vs {nfpa13_ft_per_ft}"
            );
        }
    }

    #[test]
    fn si_form_matches_the_stated_formula() {
        // 10.67 * 500 m * 0.05^1.852 / (120^1.852 * 0.2^4.87), the SI form as stated in the issue.
        let law = HazenWilliams::for_units(UnitSystem::Si);
        let r = law.resistance(500.0, 0.2, 120.0);
        let ours = HazenWilliams::head_loss_m(r, 0.05);
        let direct = 10.67 * 500.0 * 0.05f64.powf(1.852) / (120f64.powf(1.852) * 0.2f64.powf(4.87));
        assert!((ours - direct).abs() / direct < 1e-12);
    }

    #[test]
    fn si_form_agrees_with_the_sprinkler_standard_form() {
        // NFPA 13, SI form (from memory): p = 6.05e5 Q^1.85 / (C^1.85 d^4.87) bar per metre, Q in L/min,
        // d in mm. 50 L/s = 3000 L/min; one bar is 10.197 m of water (standard gravity).
        let law = HazenWilliams::for_units(UnitSystem::Si);
        let ours_m_per_m = HazenWilliams::head_loss_m(law.resistance(1.0, 0.2, 120.0), 0.05);
        let nfpa13_m_per_m = 6.05e5 * f64::powf(3000.0, 1.85)
            / (f64::powf(120.0, 1.85) * f64::powf(200.0, 4.87))
            / 0.0980665;
        assert!((ours_m_per_m / nfpa13_m_per_m - 1.0).abs() < 1e-2);
    }

    #[test]
    fn the_two_constants_agree_to_a_tenth_of_a_percent() {
        // Common practice, no source: 10.44 (US) and 10.67 (SI) are two roundings of one law.
        let us = HazenWilliams::for_units(UnitSystem::Us);
        let si = HazenWilliams::for_units(UnitSystem::Si);
        let ratio = us.k_si / si.k_si;
        assert!((ratio - 1.0).abs() < 2e-3, "{ratio}");
    }

    #[test]
    fn loss_is_odd_and_inverse_is_exact() {
        let r = 1234.5;
        for q in [-0.3, -1e-4, 0.0, 2e-3, 0.7] {
            let h = HazenWilliams::head_loss_m(r, q);
            assert_eq!(h, -HazenWilliams::head_loss_m(r, -q));
            assert!((HazenWilliams::flow_for_head_loss(r, h) - q).abs() < 1e-12);
        }
    }
}
