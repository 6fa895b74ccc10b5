//! Any text as a network file: the loader returns a network or diagnostics, never panics or hangs.
#![no_main]

use libfuzzer_sys::fuzz_target;
use roughcal::network::file::{NetworkFileError, parse_network};

fuzz_target!(|data: &[u8]| {
    let text = String::from_utf8_lossy(data);
    match parse_network(&text, "fuzz.toml") {
        Ok(loaded) => {
            // A loaded network must also survive the solver's set-up and one solve.
            let net = &loaded.network;
            if let Ok(solver) = roughcal::hydraulics::GradientSolver::new(net) {
                let state = roughcal::hydraulics::OperatingState::base(net);
                let _ = solver.solve(net, &state, &net.c_factors(), None);
            }
        }
        Err(NetworkFileError::Invalid { diagnostics }) => {
            assert!(
                !diagnostics.is_empty(),
                "an invalid file names at least one defect"
            );
            for d in &diagnostics {
                assert!(d.line >= 1 && d.column >= 1);
                let _ = d.to_string();
            }
        }
        Err(NetworkFileError::Unreadable { .. }) => unreachable!("parse_network reads no file"),
    }
});
