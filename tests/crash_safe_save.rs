//! A save killed at any moment leaves on disk a sheet that was written whole: never a mix of two
//! versions, never a truncation.
//!
//! The test binary re-runs itself as the child (`ROUGHCAL_CRASH_CHILD` names the sheet to write): the
//! child saves ever-larger sheets through `save_sheet` until it is killed with SIGKILL
//! (`Child::kill`). Version k of the sheet is derived from k alone, so after each kill the parent reads
//! the file, finds k in its first cell, regenerates version k and compares the bytes.

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant, SystemTime, UNIX_EPOCH};

use roughcal::fieldtest::{FieldSheet, save_sheet};
use roughcal::network::UnitSystem;

const CHILD_ENV: &str = "ROUGHCAL_CRASH_CHILD";
const KILLS: usize = 40;
/// Rows added per version; the sizes grow from 2 kB to well past a megabyte within the child's life.
const ROWS_PER_VERSION: usize = 40;

/// Version k: `k * ROWS_PER_VERSION` rows whose every cell carries k, so two versions never share a row.
fn version(k: usize) -> FieldSheet {
    let mut sheet = FieldSheet::empty(UnitSystem::Us);
    for i in 0..k * ROWS_PER_VERSION {
        let cells = vec![
            format!("V{k}-R{i}"),
            "2026-10-13".to_string(),
            format!("{:02}:{:02}", (i / 60) % 24, i % 60),
            format!("J-{k}-{i}"),
            format!("J-{k}-{}", i + 1),
            format!("{}.5", 60 + k % 20),
            format!("{}.0", 30 + i % 20),
            String::new(),
            format!("{}", 10 + (k + i) % 15),
            "2.5".to_string(),
            "0.9".to_string(),
            String::new(),
            format!("crew note {k}/{i}, with \"quotes\" and a comma"),
        ];
        if sheet.insert_row_cells(i, cells).is_err() {
            unreachable!("a short row always fits");
        }
    }
    sheet
}

/// The child: save versions 1, 2, 3, ... until killed (or, as a safety net, after 20 s). Ignored in
/// ordinary runs; the parent runs it with `--ignored`.
#[test]
#[ignore = "the child process of a_save_killed_at_any_moment_leaves_a_whole_version"]
fn crash_child_saves_until_killed() {
    let target = PathBuf::from(std::env::var_os(CHILD_ENV).expect("run by the parent test"));
    let started = Instant::now();
    let mut k = 1;
    while started.elapsed() < Duration::from_secs(20) {
        save_sheet(&version(k), &target).expect("the child's save works");
        k += 1;
    }
}

/// A small xorshift generator: random kill moments without another dependency; the seed is printed so
/// a failure can be replayed.
struct Moments(u64);

impl Moments {
    fn next_delay(&mut self) -> Duration {
        self.0 ^= self.0 << 13;
        self.0 ^= self.0 >> 7;
        self.0 ^= self.0 << 17;
        Duration::from_micros(self.0 % 30_000)
    }
}

/// Which version the file on disk is, checked byte for byte against the regenerated one.
fn check_whole_version(path: &Path, kill: usize) -> Option<usize> {
    let bytes = match std::fs::read(path) {
        Ok(bytes) => bytes,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return None,
        Err(e) => panic!("kill {kill}: cannot read the sheet: {e}"),
    };
    let text = String::from_utf8(bytes).unwrap_or_else(|_| panic!("kill {kill}: not UTF-8"));
    let sheet = FieldSheet::parse(&text, "crash.csv")
        .unwrap_or_else(|e| panic!("kill {kill}: the file on disk does not parse: {e}"));
    let first = sheet.cell_at(0, 0).expect("a saved version has rows");
    let k: usize = first
        .strip_prefix('V')
        .and_then(|rest| rest.split('-').next())
        .and_then(|n| n.parse().ok())
        .unwrap_or_else(|| panic!("kill {kill}: unexpected first cell `{first}`"));
    assert!(
        text == version(k).to_csv_string(),
        "kill {kill}: the file is not version {k} as written ({} bytes, {} rows)",
        text.len(),
        sheet.row_count()
    );
    Some(k)
}

#[test]
fn a_save_killed_at_any_moment_leaves_a_whole_version() {
    let dir = tempfile::tempdir().unwrap();
    let target = dir.path().join("crash.csv");
    let seed = SystemTime::now()
        .duration_since(UNIX_EPOCH)
        .map_or(0x9e37_79b9, |d| d.as_nanos() as u64)
        | 1;
    println!("kill-moment seed {seed:#x}");
    let mut moments = Moments(seed);
    let exe = std::env::current_exe().unwrap();
    let deadline = Instant::now() + Duration::from_secs(60);
    let mut versions_seen = Vec::new();
    for kill in 0..KILLS {
        assert!(Instant::now() < deadline, "the kill loop took over 60 s");
        let mut child = Command::new(&exe)
            .args([
                "--ignored",
                "--exact",
                "crash_child_saves_until_killed",
                "--nocapture",
            ])
            .env(CHILD_ENV, &target)
            .stdout(Stdio::null())
            .stderr(Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(moments.next_delay());
        // SIGKILL on Unix: the child gets no chance to tidy up.
        let _ = child.kill();
        let _ = child.wait();
        if let Some(k) = check_whole_version(&target, kill) {
            versions_seen.push(k);
        }
    }
    // Without this the test could pass by never writing anything.
    assert!(
        !versions_seen.is_empty(),
        "no kill came after a first save; the child never wrote"
    );
    println!("versions found after the kills: {versions_seen:?}");
}
