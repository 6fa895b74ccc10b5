//! Key press to redrawn screen, with a 2,000-row sheet and a 20,000-pipe network: a cursor move on
//! Readings and on Map, through `update` and a full render into a test backend. Target: under 10 ms.

use std::fmt::Write as _;
use std::path::PathBuf;

use criterion::{Criterion, criterion_group, criterion_main};
use ratatui::Terminal;
use ratatui::backend::TestBackend;
use roughcal::fieldtest::FieldSheet;
use roughcal::network::{Network, synthetic};
use roughcal::tui::app::{Action, After, Move, View};
use roughcal::tui::session::Session;
use roughcal::tui::{App, Theme, update, views};

/// A 100 x 101 looped street grid: 20,000 pipes in three era groups.
fn city() -> Network {
    synthetic::grid(100, 101, 7)
}

fn app() -> App {
    let network = city();
    let mut csv = String::from(
        "test,date,time,residual_node,flow_node,static_psi,residual_psi,flow_gpm,pitot_psi,outlet_in,coefficient,condition,note\n",
    );
    for i in 0..2000 {
        let _ = writeln!(
            csv,
            "T{i},2024-05-01,09:00,{},{},{},{},,{},2.5,0.9,,row {i}",
            network.junctions[(i * 5) % network.junctions.len()].id,
            network.junctions[(i * 5 + 1) % network.junctions.len()].id,
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
        sheet_base: sheet.clone(),
        sheet,
        scratch_folder: None,
        keep_original: false,
        sheet_file: Default::default(),
        network_file: Default::default(),
    };
    let mut app = App::new(session, Theme { no_color: false });
    update(&mut app, Action::Resize(80, 24));
    assert_eq!(app.session.network.pipes.len(), 20_000);
    assert_eq!(app.session.sheet.row_count(), 2_000);
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
    // Typing into a cell: each character screens the row again (preview) and redraws.
    update(&mut app, Action::MoveCursor(Move::Top));
    update(&mut app, Action::BeginEdit);
    c.bench_function("readings type a character + render", |b| {
        b.iter(|| {
            update(&mut app, Action::InsertChar('1'));
            update(&mut app, Action::DeleteBack);
            terminal
                .draw(|frame| views::render(&app, frame))
                .expect("draw");
        })
    });
    update(&mut app, Action::CancelEdit);
    // Committing a cell: the whole sheet is screened again and its text made for the save effect (the
    // write itself is left out: it is the disk's time, not the screen's).
    let mut flip = false;
    c.bench_function("readings commit an edit (2,000 rows) + render", |b| {
        b.iter(|| {
            flip = !flip;
            update(
                &mut app,
                Action::BeginEditWith(if flip { '7' } else { '8' }),
            );
            let effects = update(&mut app, Action::CommitEdit(After::Stay));
            terminal
                .draw(|frame| views::render(&app, frame))
                .expect("draw");
            effects
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
