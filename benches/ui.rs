//! Key press to redrawn screen, with a 2,000-row sheet and a 20,000-pipe network: a cursor move on
//! Readings and on Map, through `update` and a full render into a test backend. Target: under 10 ms.

use std::fmt::Write as _;
use std::path::PathBuf;

use criterion::{Criterion, criterion_group, criterion_main};
use ratatui::Terminal;
use ratatui::backend::TestBackend;
use roughcal::fieldtest::FieldSheet;
use roughcal::network::{Junction, Network, NodeRef, Pipe, RoughnessGroup, UnitSystem};
use roughcal::tui::app::{Action, Move, Session, View};
use roughcal::tui::{App, Theme, update, views};

/// A 100 x 101 grid of junctions, every neighbour joined: 20,000 pipes in four groups.
fn city() -> Network {
    let (columns, rows) = (100usize, 101usize);
    let units = UnitSystem::Us;
    let junctions = (0..columns * rows)
        .map(|i| Junction {
            id: format!("J{i}"),
            elevation_m: 30.0,
            demand_m3s: 0.0005,
            position: Some(((i % columns) as f64 * 300.0, (i / columns) as f64 * 300.0)),
        })
        .collect();
    let mut pipes = Vec::new();
    let add = |a: usize, b: usize, pipes: &mut Vec<Pipe>| {
        let n = pipes.len();
        pipes.push(Pipe {
            id: format!("P{n}"),
            from: NodeRef::Junction(a),
            to: NodeRef::Junction(b),
            length_m: units.length_to_m(300.0),
            diameter_m: units.diameter_to_m(8.0),
            c_factor: 110.0,
            group: Some(n % 4),
            closed: false,
            check_valve: false,
        });
    };
    for r in 0..rows {
        for c in 0..columns {
            let here = r * columns + c;
            if c + 1 < columns {
                add(here, here + 1, &mut pipes);
            }
            if r + 1 < rows && pipes.len() < 20_000 {
                add(here, here + columns, &mut pipes);
            }
        }
    }
    pipes.truncate(20_000);
    Network {
        title: "bench city".into(),
        units,
        junctions,
        fixed_heads: Vec::new(),
        pipes,
        pumps: Vec::new(),
        groups: (0..4)
            .map(|g| RoughnessGroup {
                name: format!("g{g}"),
                min_c: 40.0,
                max_c: 150.0,
                locked: false,
            })
            .collect(),
        conditions: Vec::new(),
    }
}

fn app() -> App {
    let network = city();
    let mut csv = String::from(
        "test,date,time,residual_node,flow_node,static_psi,residual_psi,flow_gpm,pitot_psi,outlet_in,coefficient,condition,note\n",
    );
    for i in 0..2000 {
        let _ = writeln!(
            csv,
            "T{i},2024-05-01,09:00,J{},J{},{},{},,{},2.5,0.9,,row {i}",
            (i * 5) % 10_000,
            (i * 5 + 1) % 10_000,
            60 + i % 20,
            40 + i % 15,
            20 + i % 10
        );
    }
    let sheet = FieldSheet::parse(&csv, "bench.csv").expect("bench sheet");
    let session = Session {
        network_path: PathBuf::from("bench.toml"),
        network_text: String::new(),
        network,
        sheet_path: PathBuf::from("bench.csv"),
        sheet,
        scratch_folder: None,
        keep_original: false,
    };
    let mut app = App::new(session, Theme { no_color: false });
    update(&mut app, Action::Resize(80, 24));
    app
}

fn key_to_screen(c: &mut Criterion) {
    let mut app = app();
    let mut terminal = Terminal::new(TestBackend::new(80, 24)).expect("test backend");
    let mut down = true;
    c.bench_function("readings cursor move + render", |b| {
        b.iter(|| {
            // Walk down and back up the sheet so every move scrolls somewhere real.
            if app.readings.row + 1 >= app.session.sheet.row_count() {
                down = false;
            } else if app.readings.row == 0 {
                down = true;
            }
            let step = if down { Move::PageDown } else { Move::PageUp };
            update(&mut app, Action::MoveCursor(step));
            terminal
                .draw(|frame| views::render(&app, frame))
                .expect("draw");
        })
    });
    update(&mut app, Action::SwitchView(View::Map));
    c.bench_function("map test move + render", |b| {
        b.iter(|| {
            update(&mut app, Action::MoveCursor(Move::Right));
            terminal
                .draw(|frame| views::render(&app, frame))
                .expect("draw");
        })
    });
}

criterion_group!(benches, key_to_screen);
criterion_main!(benches);
