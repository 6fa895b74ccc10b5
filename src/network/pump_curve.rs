//! Least-squares fit of a pump head curve through the points of a network file.

use nalgebra::{Matrix3, Vector3};

use super::model::PumpCurve;

impl PumpCurve {
    /// Fits `head_gain_m = a + b q + c q^2` to `points` (q in m^3/s, head gain in m) by ordinary least
    /// squares: the 3x3 normal equations (X^T X) [a b c]^T = X^T h with rows X_i = [1, q_i, q_i^2].
    /// Through exactly three points of distinct flow this is the exact interpolating parabola.
    ///
    /// The flows are scaled by the largest |q| before solving so that the normal matrix is well
    /// conditioned whatever the unit of the input; the coefficients are scaled back afterwards.
    ///
    /// Returns `None` when fewer than three distinct flows are given, when a value is not finite, or
    /// when the fit is not finite.
    pub fn fit_least_squares(points: Vec<(f64, f64)>) -> Option<Self> {
        if points.iter().any(|(q, h)| !q.is_finite() || !h.is_finite()) {
            return None;
        }
        let mut flows: Vec<f64> = points.iter().map(|(q, _)| *q).collect();
        flows.sort_by(f64::total_cmp);
        flows.dedup();
        if flows.len() < 3 {
            return None;
        }
        let scale = flows.iter().fold(0.0_f64, |m, q| m.max(q.abs()));
        if !(scale > 0.0 && scale.is_finite()) {
            return None;
        }
        let mut normal = Matrix3::<f64>::zeros();
        let mut rhs = Vector3::<f64>::zeros();
        for (q, h) in &points {
            let t = q / scale;
            let row = Vector3::new(1.0, t, t * t);
            normal += row * row.transpose();
            rhs += row * *h;
        }
        let solution = normal.lu().solve(&rhs)?;
        let a = solution.x;
        let b = solution.y / scale;
        let c = solution.z / (scale * scale);
        if !(a.is_finite() && b.is_finite() && c.is_finite()) {
            return None;
        }
        Some(Self { points, a, b, c })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn exact_parabola_through_three_points() {
        // Hand computation: h = 100 - 2000 q^2 passes (0, 100), (0.1, 80), (0.2, 20).
        let curve =
            PumpCurve::fit_least_squares(vec![(0.0, 100.0), (0.1, 80.0), (0.2, 20.0)]).unwrap();
        assert!((curve.a - 100.0).abs() < 1e-9, "{curve:?}");
        assert!(curve.b.abs() < 1e-7, "{curve:?}");
        assert!((curve.c + 2000.0).abs() < 1e-6, "{curve:?}");
    }

    #[test]
    fn least_squares_through_points_on_a_parabola_recovers_it() {
        // Five points exactly on h = 50 - 30 q - 400 q^2: the residual is zero, so LS returns it.
        let points: Vec<(f64, f64)> = [0.0, 0.05, 0.1, 0.15, 0.2]
            .iter()
            .map(|&q| (q, 50.0 - 30.0 * q - 400.0 * q * q))
            .collect();
        let curve = PumpCurve::fit_least_squares(points).unwrap();
        assert!((curve.a - 50.0).abs() < 1e-9);
        assert!((curve.b + 30.0).abs() < 1e-7);
        assert!((curve.c + 400.0).abs() < 1e-6);
    }

    #[test]
    fn least_squares_of_four_points_matches_normal_equations_by_hand() {
        // Points (0,10), (1,9), (2,6), (3,2). Hand-built normal equations:
        // [4 6 14; 6 14 36; 14 36 98] [a b c] = [27 27 51]; solved exactly in fractions:
        // a = 201/20 = 10.05, b = -9/20 = -0.45, c = -3/4 (residuals -0.05, 0.15, -0.15, 0.05 sum to 0).
        let curve =
            PumpCurve::fit_least_squares(vec![(0.0, 10.0), (1.0, 9.0), (2.0, 6.0), (3.0, 2.0)])
                .unwrap();
        assert!((curve.a - 10.05).abs() < 1e-9, "{curve:?}");
        assert!((curve.b + 0.45).abs() < 1e-9, "{curve:?}");
        assert!((curve.c + 0.75).abs() < 1e-9, "{curve:?}");
    }

    #[test]
    fn too_few_distinct_flows_do_not_fit() {
        assert!(PumpCurve::fit_least_squares(vec![(0.0, 10.0), (1.0, 9.0)]).is_none());
        assert!(PumpCurve::fit_least_squares(vec![(0.0, 10.0), (1.0, 9.0), (1.0, 8.0)]).is_none());
        assert!(
            PumpCurve::fit_least_squares(vec![(0.0, 10.0), (1.0, f64::NAN), (2.0, 8.0)]).is_none()
        );
    }
}
