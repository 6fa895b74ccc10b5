//! The gradient solver against closed-form answers derived from the Hazen-Williams law and pump curves.

use roughcal::hydraulics::{
    GradientSolver, HazenWilliams, LinkStatus, OperatingState, SolveWarning,
};
use roughcal::network::{FixedHead, Junction, Network, NodeRef, Pipe, Pump, PumpCurve, UnitSystem};

fn network(junctions: Vec<Junction>, fixed: Vec<FixedHead>, pipes: Vec<Pipe>) -> Network {
    Network {
        title: "test".into(),
        units: UnitSystem::Si,
        junctions,
        fixed_heads: fixed,
        pipes,
        pumps: vec![],
        groups: vec![],
        valves: Vec::new(),
        hazen_williams_constant: None,
        flow_unit: None,
        conditions: vec![],
        lonlat_origin: None,
    }
}

fn junction(id: &str, elevation_m: f64, demand_m3s: f64) -> Junction {
    Junction {
        id: id.into(),
        elevation_m,
        demand_m3s,
        position: None,
    }
}

fn fixed(id: &str, head_m: f64) -> FixedHead {
    FixedHead {
        id: id.into(),
        head_m,
        position: None,
    }
}

fn pipe(id: &str, from: NodeRef, to: NodeRef, length_m: f64, diameter_m: f64, c: f64) -> Pipe {
    Pipe {
        id: id.into(),
        from,
        to,
        length_m,
        diameter_m,
        c_factor: c,
        group: None,
        closed: false,
        check_valve: false,
        minor_loss: 0.0,
    }
}

/// Exact quadratic through three points (the loader does the same by least squares).
fn curve_through(points: [(f64, f64); 3]) -> PumpCurve {
    let m = nalgebra::Matrix3::from_fn(|i, j| points[i].0.powi(j as i32));
    let rhs = nalgebra::Vector3::new(points[0].1, points[1].1, points[2].1);
    let coef = m.lu().solve(&rhs).expect("distinct flows");
    PumpCurve {
        points: points.to_vec(),
        a: coef[0],
        b: coef[1],
        c: coef[2],
    }
}

fn solve(net: &Network) -> roughcal::hydraulics::Solution {
    let solver = GradientSolver::new(net).expect("topology");
    solver
        .solve(net, &OperatingState::base(net), &net.c_factors(), None)
        .expect("converges")
}

#[test]
fn two_reservoirs_one_pipe_through_a_junction() {
    // Derived from the Hazen-Williams law: with all loss in series pipes, Q = (dH / (r1 + r2))^(1/1.852).
    let net = network(
        vec![junction("J", 0.0, 0.0)],
        vec![fixed("HIGH", 100.0), fixed("LOW", 80.0)],
        vec![
            pipe(
                "P1",
                NodeRef::FixedHead(0),
                NodeRef::Junction(0),
                600.0,
                0.3,
                120.0,
            ),
            pipe(
                "P2",
                NodeRef::Junction(0),
                NodeRef::FixedHead(1),
                400.0,
                0.3,
                120.0,
            ),
        ],
    );
    let law = HazenWilliams::for_units(UnitSystem::Si);
    let r_total = law.resistance(1000.0, 0.3, 120.0);
    let expected_q = (20.0 / r_total).powf(1.0 / 1.852);
    let solution = solve(&net);
    for q in &solution.pipe_flow_m3s {
        assert!(
            (q - expected_q).abs() / expected_q < 1e-7,
            "{q} vs {expected_q}"
        );
    }
    // The junction sits 60 % of the way along the loss line.
    assert!((solution.head_m[0] - (100.0 - 0.6 * 20.0)).abs() < 1e-5);
    assert!(solution.max_imbalance_m3s < 1e-10);
}

#[test]
fn flow_reverses_when_the_pipe_is_drawn_backwards() {
    let net = network(
        vec![junction("J", 0.0, 0.01)],
        vec![fixed("HIGH", 100.0)],
        vec![pipe(
            "P1",
            NodeRef::Junction(0),
            NodeRef::FixedHead(0),
            500.0,
            0.2,
            100.0,
        )],
    );
    let solution = solve(&net);
    assert!((solution.pipe_flow_m3s[0] + 0.01).abs() < 1e-10);
    let law = HazenWilliams::for_units(UnitSystem::Si);
    let loss = HazenWilliams::head_loss_m(law.resistance(500.0, 0.2, 100.0), 0.01);
    assert!((solution.head_m[0] - (100.0 - loss)).abs() < 1e-6);
}

fn pump_network(suction_m: f64, discharge_m: f64) -> Network {
    let mut net = network(
        vec![junction("S", 0.0, 0.0), junction("D", 0.0, 0.0)],
        vec![fixed("WELL", suction_m), fixed("TANK", discharge_m)],
        vec![
            pipe(
                "IN",
                NodeRef::FixedHead(0),
                NodeRef::Junction(0),
                50.0,
                0.3,
                130.0,
            ),
            pipe(
                "OUT",
                NodeRef::Junction(1),
                NodeRef::FixedHead(1),
                1500.0,
                0.25,
                110.0,
            ),
        ],
    );
    net.pumps.push(Pump {
        id: "PU".into(),
        from: NodeRef::Junction(0),
        to: NodeRef::Junction(1),
        curve: curve_through([(0.0, 60.0), (0.05, 52.0), (0.09, 36.0)]),
        off: false,
    });
    net
}

#[test]
fn pump_lifts_between_two_fixed_heads_on_its_curve() {
    // Derived: the operating point solves a + bQ + cQ^2 = (H_tank - H_well) + (r_in + r_out) Q^1.852.
    let net = pump_network(10.0, 40.0);
    let law = HazenWilliams::for_units(UnitSystem::Si);
    let r = law.resistance(50.0, 0.3, 130.0) + law.resistance(1500.0, 0.25, 110.0);
    let curve = &net.pumps[0].curve;
    let mismatch = |q: f64| curve.head_gain_m(q) - 30.0 - r * q.powf(1.852);
    let (mut lo, mut hi) = (0.0, 0.2);
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if mismatch(mid) > 0.0 {
            lo = mid
        } else {
            hi = mid
        }
    }
    let solution = solve(&net);
    let q = solution.pump_flow_m3s[0];
    assert!((q - lo).abs() < 1e-8, "{q} vs {lo}");
    assert!((solution.pump_head_gain_m[0] - curve.head_gain_m(lo)).abs() < 1e-5);
    assert_eq!(solution.pump_status[0], LinkStatus::Open);
}

#[test]
fn pump_that_cannot_lift_shuts_off_with_a_warning() {
    // Shutoff head 60 m against a 70 m lift: the pump cannot deliver (common practice, no source: a
    // centrifugal pump delivers nothing against more than its shutoff head).
    let net = pump_network(10.0, 80.0);
    let solution = solve(&net);
    assert_eq!(solution.pump_status[0], LinkStatus::PumpCannotLift);
    assert!(solution.pump_flow_m3s[0].abs() < 1e-12);
    assert!(
        solution
            .warnings
            .iter()
            .any(|w| matches!(w, SolveWarning::PumpCannotLift { pump: 0 }))
    );
}

#[test]
fn check_valve_closes_against_reverse_flow() {
    // A check valve on the pipe from the low tank: the high tank would drive flow backwards into it.
    let mut net = network(
        vec![junction("J", 0.0, 0.005)],
        vec![fixed("HIGH", 100.0), fixed("LOW", 60.0)],
        vec![
            pipe(
                "A",
                NodeRef::FixedHead(0),
                NodeRef::Junction(0),
                300.0,
                0.2,
                120.0,
            ),
            pipe(
                "B",
                NodeRef::FixedHead(1),
                NodeRef::Junction(0),
                300.0,
                0.2,
                120.0,
            ),
        ],
    );
    net.pipes[1].check_valve = true;
    let solution = solve(&net);
    assert_eq!(solution.pipe_status[1], LinkStatus::CheckValveClosed);
    assert_eq!(solution.pipe_flow_m3s[1], 0.0);
    assert!((solution.pipe_flow_m3s[0] - 0.005).abs() < 1e-10);

    // Without the valve the same pipe runs backwards.
    net.pipes[1].check_valve = false;
    let open = solve(&net);
    assert!(open.pipe_flow_m3s[1] < 0.0);
}

#[test]
fn check_valve_reopens_when_the_grade_favours_it() {
    let mut net = network(
        vec![junction("J", 0.0, 0.02)],
        vec![fixed("HIGH", 100.0), fixed("LOW", 95.0)],
        vec![
            pipe(
                "A",
                NodeRef::FixedHead(0),
                NodeRef::Junction(0),
                3000.0,
                0.15,
                100.0,
            ),
            pipe(
                "B",
                NodeRef::FixedHead(1),
                NodeRef::Junction(0),
                300.0,
                0.2,
                120.0,
            ),
        ],
    );
    net.pipes[1].check_valve = true;
    let solver = GradientSolver::new(&net).unwrap();
    let state = OperatingState::base(&net);
    let mut warm = solver.solve(&net, &state, &net.c_factors(), None).unwrap();
    warm.pipe_status[1] = LinkStatus::CheckValveClosed;
    let solution = solver
        .solve(&net, &state, &net.c_factors(), Some(&warm))
        .unwrap();
    assert_eq!(solution.pipe_status[1], LinkStatus::Open);
    assert!(solution.pipe_flow_m3s[1] > 0.0);
}

#[test]
fn a_closed_pipe_isolates_a_junction_and_says_so() {
    let mut net = network(
        vec![junction("J1", 0.0, 0.01), junction("J2", 0.0, 0.0)],
        vec![fixed("T", 50.0)],
        vec![
            pipe(
                "A",
                NodeRef::FixedHead(0),
                NodeRef::Junction(0),
                300.0,
                0.2,
                120.0,
            ),
            pipe(
                "B",
                NodeRef::Junction(0),
                NodeRef::Junction(1),
                300.0,
                0.2,
                120.0,
            ),
        ],
    );
    net.pipes[1].closed = true;
    let solution = solve(&net);
    assert!(solution.isolated[1] && !solution.isolated[0]);
    assert!(solution.pressure_head_m(&net, 1).is_none());
    assert!(solution.pressure_head_m(&net, 0).is_some());
    assert!(
        solution
            .warnings
            .iter()
            .any(|w| matches!(w, SolveWarning::Isolated { junctions } if junctions == &vec![1]))
    );
}

#[test]
fn head_sensitivity_matches_finite_differences() {
    // A looped network: two paths from the tank to the far junction.
    let net = network(
        vec![
            junction("A", 10.0, 0.01),
            junction("B", 12.0, 0.02),
            junction("C", 8.0, 0.015),
        ],
        vec![fixed("T", 90.0)],
        vec![
            pipe(
                "1",
                NodeRef::FixedHead(0),
                NodeRef::Junction(0),
                800.0,
                0.25,
                110.0,
            ),
            pipe(
                "2",
                NodeRef::Junction(0),
                NodeRef::Junction(1),
                500.0,
                0.15,
                90.0,
            ),
            pipe(
                "3",
                NodeRef::Junction(0),
                NodeRef::Junction(2),
                600.0,
                0.2,
                130.0,
            ),
            pipe(
                "4",
                NodeRef::Junction(2),
                NodeRef::Junction(1),
                400.0,
                0.15,
                70.0,
            ),
        ],
    );
    let solver = GradientSolver::new(&net).unwrap();
    let state = OperatingState::base(&net);
    let c = net.c_factors();
    let base = solver.solve(&net, &state, &c, None).unwrap();
    let analytic = base.head_sensitivity_to_c(&net, &c, 1).unwrap();
    for k in 0..c.len() {
        let step = 1e-3 * c[k];
        let mut up = c.clone();
        up[k] += step;
        let mut down = c.clone();
        down[k] -= step;
        let h_up = solver.solve(&net, &state, &up, Some(&base)).unwrap().head_m[1];
        let h_down = solver
            .solve(&net, &state, &down, Some(&base))
            .unwrap()
            .head_m[1];
        let numeric = (h_up - h_down) / (2.0 * step);
        assert!(
            (analytic[k] - numeric).abs() < 1e-4 * numeric.abs().max(1e-6),
            "pipe {k}: {} vs {numeric}",
            analytic[k]
        );
    }
}

#[test]
fn demand_sensitivity_matches_finite_differences() {
    // Implicit differentiation of continuity (A dH = -e_i), checked against central differences of the
    // solver itself (general numerical practice, no source needed beyond the definition).

    // A looped network: two paths from the tank to the far junction.
    let net = network(
        vec![
            junction("A", 10.0, 0.01),
            junction("B", 12.0, 0.02),
            junction("C", 8.0, 0.015),
        ],
        vec![fixed("T", 90.0)],
        vec![
            pipe(
                "1",
                NodeRef::FixedHead(0),
                NodeRef::Junction(0),
                800.0,
                0.25,
                110.0,
            ),
            pipe(
                "2",
                NodeRef::Junction(0),
                NodeRef::Junction(1),
                500.0,
                0.15,
                90.0,
            ),
            pipe(
                "3",
                NodeRef::Junction(0),
                NodeRef::Junction(2),
                600.0,
                0.2,
                130.0,
            ),
            pipe(
                "4",
                NodeRef::Junction(2),
                NodeRef::Junction(1),
                400.0,
                0.15,
                70.0,
            ),
        ],
    );
    let solver = GradientSolver::new(&net).unwrap();
    let state = OperatingState::base(&net);
    let c = net.c_factors();
    let base = solver.solve(&net, &state, &c, None).unwrap();
    let analytic = base.head_sensitivity_to_demand(1).unwrap();
    for (i, &expected) in analytic.iter().enumerate() {
        let step = 1e-4;
        let mut up = state.clone();
        up.add_demand(i, step);
        let mut down = state.clone();
        down.add_demand(i, -step);
        let h_up = solver.solve(&net, &up, &c, Some(&base)).unwrap().head_m[1];
        let h_down = solver.solve(&net, &down, &c, Some(&base)).unwrap().head_m[1];
        let numeric = (h_up - h_down) / (2.0 * step);
        assert!(numeric < 0.0, "more demand lowers the grade");
        assert!(
            (expected - numeric).abs() < 1e-4 * numeric.abs(),
            "junction {i}: {expected} vs {numeric}"
        );
    }
}
