//! Flow available at a target residual pressure, extrapolated from one flow test.
//!
//! Results are an aid to be reviewed by a licensed engineer; local codes and the fire authority govern.

use crate::network::UnitSystem;

/// Exponent of the flow-pressure extrapolation, `1 / 1.85` rounded (NFPA 291).
pub const FLOW_PRESSURE_EXPONENT: f64 = 0.54;

/// Default target residual of a us sheet: 20 psi (NFPA 291).
pub const DEFAULT_TARGET_PSI: f64 = 20.0;

/// Default target residual of an si sheet: 140 kPa (20 psi is 137.9 kPa; 140 kPa is the rounded
/// metric value in use; common practice, no source).
pub const DEFAULT_TARGET_KPA: f64 = 140.0;

/// The default target residual in the sheet's pressure unit.
pub fn default_target(units: UnitSystem) -> f64 {
    match units {
        UnitSystem::Us => DEFAULT_TARGET_PSI,
        UnitSystem::Si => DEFAULT_TARGET_KPA,
    }
}

/// The flow a test says is available at a target residual.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum AvailableFlow {
    /// The extrapolated flow, in the unit of the test flow.
    Flow(f64),
    /// The target is at or above the static pressure: the main cannot hold the target even with no
    /// hydrant open, so no flow is available at it (reported as 0).
    NoneAtTarget,
    /// The test cannot be extrapolated: the residual is not below the static, or a value is not a
    /// finite, non-negative number.
    Undefined,
}

impl AvailableFlow {
    /// The flow as a number: the flow, 0 when none is available at the target, `None` when undefined.
    pub fn value(self) -> Option<f64> {
        match self {
            Self::Flow(q) => Some(q),
            Self::NoneAtTarget => Some(0.0),
            Self::Undefined => None,
        }
    }
}

/// Flow available at target residual `T`: `Q_R = Q_F ((S - T) / (S - R))^0.54` (NFPA 291), with `Q_F`
/// the total flow of the test, `S` the static and `R` the residual pressure. Any flow and pressure
/// units, as long as the three pressures share one.
pub fn available_flow(
    total_flow: f64,
    static_pressure: f64,
    residual_pressure: f64,
    target: f64,
) -> AvailableFlow {
    let finite = [total_flow, static_pressure, residual_pressure, target]
        .iter()
        .all(|v| v.is_finite());
    if !finite || total_flow < 0.0 || target < 0.0 || residual_pressure >= static_pressure {
        return AvailableFlow::Undefined;
    }
    if target >= static_pressure {
        return AvailableFlow::NoneAtTarget;
    }
    let ratio = (static_pressure - target) / (static_pressure - residual_pressure);
    AvailableFlow::Flow(total_flow * ratio.powf(FLOW_PRESSURE_EXPONENT))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn extrapolation_checked_by_logarithms() {
        // NFPA 291: Q_R = Q_F (h_r / h_f)^0.54. 1000 gpm at 60 psi static, 45 psi residual, to 20 psi:
        // h_r = 40, h_f = 15; by logarithms, exp(0.54 * ln(40/15)) = exp(0.54 * 0.980829) = 1.698...
        let by_logs = 1000.0 * (0.54 * (40.0_f64 / 15.0).ln()).exp();
        let Some(q) = available_flow(1000.0, 60.0, 45.0, 20.0).value() else {
            panic!("defined");
        };
        assert!((q - by_logs).abs() < 1e-9);
        // Hand arithmetic from the same log form, to four figures: 1000 * 1.6980 = 1698 gpm.
        assert!((q - 1698.0).abs() < 1.0, "{q}");
    }

    #[test]
    fn target_equal_to_residual_gives_the_test_flow() {
        // NFPA 291 formula: at T = R the ratio is 1 and Q_R = Q_F.
        assert_eq!(
            available_flow(850.0, 70.0, 50.0, 50.0),
            AvailableFlow::Flow(850.0)
        );
    }

    #[test]
    fn exponent_is_inverse_of_hazen_williams_flow_exponent() {
        // Hazen-Williams head loss goes as Q^1.852 (AWWA M32); 1 / 1.852 = 0.540 (NFPA 291 rounds to 0.54).
        assert!((1.0 / 1.852 - FLOW_PRESSURE_EXPONENT).abs() < 1e-3);
    }

    #[test]
    fn target_at_or_above_static_has_no_flow() {
        assert_eq!(
            available_flow(900.0, 20.0, 12.0, 20.0),
            AvailableFlow::NoneAtTarget
        );
        assert_eq!(available_flow(900.0, 18.0, 12.0, 20.0).value(), Some(0.0));
    }

    #[test]
    fn undefined_cases() {
        assert_eq!(
            available_flow(900.0, 50.0, 50.0, 20.0),
            AvailableFlow::Undefined
        );
        assert_eq!(
            available_flow(900.0, 50.0, 55.0, 20.0),
            AvailableFlow::Undefined
        );
        assert_eq!(
            available_flow(f64::NAN, 50.0, 40.0, 20.0),
            AvailableFlow::Undefined
        );
        assert_eq!(available_flow(900.0, 50.0, 40.0, -1.0).value(), None);
    }

    #[test]
    fn default_targets() {
        // NFPA 291: 20 psi residual; 20 psi = 137.9 kPa (NIST SP 811), 140 kPa in metric practice.
        assert_eq!(default_target(UnitSystem::Us), 20.0);
        assert_eq!(default_target(UnitSystem::Si), 140.0);
        assert!((20.0 * super::super::pitot::KPA_PER_PSI - 137.9).abs() < 0.05);
    }
}
