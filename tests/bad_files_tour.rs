//! A tour of the bad files a new user makes: each ends with a clear message naming the file (and the
//! line, where there is one) and exit code 1; never a panic, never a hang.

use std::io::Read;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

const BASE: &str = include_str!("data/base.toml");
const HEADER: &str = "test,date,time,residual_node,flow_node,static_psi,residual_psi,flow_gpm,pitot_psi,outlet_in,coefficient,condition,note";
const ROW: &str = "HT-1,2026-10-13,08:00,J-1,J-2,70.5,55.0,,14.0,2.5,0.9,,";
/// Far more than any of these runs needs on a loaded 2-core machine.
const DEADLINE: Duration = Duration::from_secs(60);

struct Run {
    code: Option<i32>,
    stdout: String,
    stderr: String,
}

/// Runs roughcal with a deadline; a run past it is killed and fails the test as a hang.
fn roughcal(dir: &Path, args: &[&str]) -> Run {
    let mut child = Command::new(env!("CARGO_BIN_EXE_roughcal"))
        .args(args)
        .current_dir(dir)
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    // Drain the pipes on threads so a long output cannot block the child.
    let mut out = child.stdout.take().unwrap();
    let mut err = child.stderr.take().unwrap();
    let out_thread = std::thread::spawn(move || {
        let mut s = String::new();
        let _ = out.read_to_string(&mut s);
        s
    });
    let err_thread = std::thread::spawn(move || {
        let mut s = String::new();
        let _ = err.read_to_string(&mut s);
        s
    });
    let started = Instant::now();
    let status = loop {
        if let Some(status) = child.try_wait().unwrap() {
            break status;
        }
        if started.elapsed() > DEADLINE {
            let _ = child.kill();
            let _ = child.wait();
            panic!("roughcal {args:?} hung for over {DEADLINE:?}");
        }
        std::thread::sleep(Duration::from_millis(20));
    };
    Run {
        code: status.code(),
        stdout: out_thread.join().unwrap(),
        stderr: err_thread.join().unwrap(),
    }
}

struct Case {
    what: &'static str,
    /// File name and content; the command gets the path in place of `{}`.
    file: (&'static str, Vec<u8>),
    command: &'static [&'static str],
    /// Must appear in stderr: the file and line (`name:LINE:`) or the file alone.
    place: String,
    /// Must appear in stderr: what is wrong, in words.
    says: &'static str,
}

fn network(base_from: &str, to: &str) -> Vec<u8> {
    assert!(BASE.contains(base_from), "{base_from}");
    BASE.replacen(base_from, to, 1).into_bytes()
}

fn sheet(text: &str) -> Vec<u8> {
    text.as_bytes().to_vec()
}

fn line_of(text: &str, needle: &str) -> usize {
    text.lines().position(|l| l.contains(needle)).unwrap() + 1
}

fn cases() -> Vec<Case> {
    let us_sheet = format!("{HEADER}\n{ROW}\n");
    vec![
        Case {
            what: "an empty network file",
            file: ("empty.toml", Vec::new()),
            command: &["check", "{}"],
            place: "empty.toml:1:1:".into(),
            says: "missing required key `units`",
        },
        Case {
            what: "an empty sheet",
            file: ("empty.csv", Vec::new()),
            command: &["fireflow", "{}"],
            place: "empty.csv:1:".into(),
            says: "the file is empty",
        },
        Case {
            what: "an export with cells separated by |",
            file: ("export.csv", sheet(&us_sheet.replace(',', "|"))),
            command: &["fireflow", "{}"],
            place: "export.csv:1:".into(),
            says: "cells seem separated by `|`",
        },
        Case {
            what: "a network with a typo'd key",
            file: ("typo.toml", network("diameter = 6.0", "diamter = 6.0")),
            command: &["solve", "{}"],
            place: format!("typo.toml:{}:", line_of(BASE, "diameter = 6.0")),
            says: "did you mean `diameter`",
        },
        Case {
            what: "a sheet with a missing column",
            file: (
                "short.csv",
                sheet(&us_sheet.replace("residual_psi,", "").replace("55.0,", "")),
            ),
            command: &["fireflow", "{}"],
            place: "short.csv:1:".into(),
            says: "required column missing (expected `residual_psi` or `residual_kpa`)",
        },
        Case {
            what: "a binary file given as a network",
            file: (
                "photo.toml",
                vec![0xff, 0xd8, 0xff, 0xe0, 0, 16, b'J', b'F'],
            ),
            command: &["check", "{}"],
            place: "photo.toml:1:1:".into(),
            says: "not UTF-8",
        },
        Case {
            what: "a binary file given as a sheet",
            file: (
                "photo.csv",
                vec![0x89, b'P', b'N', b'G', 0x0d, 0x0a, 0x1a, 0x0a, 0],
            ),
            command: &["fireflow", "{}"],
            place: "photo.csv:1:".into(),
            says: "not a text file",
        },
        Case {
            what: "a number too large for a float",
            file: ("huge.toml", network("length = 600.0", "length = 1e400")),
            command: &["solve", "{}"],
            place: format!("huge.toml:{}:", line_of(BASE, "length = 600.0")),
            says: "overflow",
        },
        Case {
            what: "NaN as an elevation",
            file: ("nan.toml", network("elevation = 705.0", "elevation = nan")),
            command: &["solve", "{}"],
            place: format!("nan.toml:{}:", line_of(BASE, "elevation = 705.0")),
            says: "must be a finite number",
        },
        Case {
            what: "a network whose only tank pipe is closed by a condition",
            file: (
                "cutoff.toml",
                network("closed = [\"P-3\"]", "closed = [\"P-1\"]"),
            ),
            command: &["solve", "{}", "--condition", "peak"],
            // Reported at the condition's name: the condition as a whole cuts the junctions off.
            place: format!("cutoff.toml:{}:", line_of(BASE, "name = \"peak\"")),
            says: "cuts junctions off from every fixed head",
        },
        Case {
            what: "a network with no tank at all",
            file: (
                "notank.toml",
                BASE.replacen("[[fixed_head]]\nid = \"T-1\"\nhead = 900.0", "", 1)
                    .replace("from = \"T-1\"", "from = \"J-4\"")
                    .into_bytes(),
            ),
            command: &["solve", "{}"],
            place: "notank.toml:1:1:".into(),
            says: "no [[fixed_head]]",
        },
        Case {
            what: "a sheet saved in another encoding",
            file: ("latin1.csv", {
                let mut bytes = us_sheet.clone().into_bytes();
                bytes.extend_from_slice(b"HT-2,,,J-1,J-2,70,50,500,,,,,caf\xe9\n");
                bytes
            }),
            command: &["fireflow", "{}"],
            place: "latin1.csv:3:".into(),
            says: "save the sheet as UTF-8 CSV",
        },
        Case {
            what: "a sheet with psi and kPa columns",
            file: (
                "mixed.csv",
                sheet(&us_sheet.replace("static_psi", "static_kpa")),
            ),
            command: &["fireflow", "{}"],
            place: "mixed.csv:1:".into(),
            says: "mixed units",
        },
        Case {
            what: "a sheet given where the network belongs",
            file: ("swapped.csv", sheet(&us_sheet)),
            command: &["solve", "{}"],
            place: "swapped.csv:1:".into(),
            says: "TOML syntax error",
        },
        Case {
            what: "a file that does not exist",
            file: ("present.toml", Vec::new()),
            command: &["solve", "absent.toml"],
            place: "absent.toml".into(),
            says: "cannot read network file",
        },
        Case {
            what: "a folder given as a sheet",
            file: ("present.csv", Vec::new()),
            command: &["fireflow", "."],
            place: ".:".into(),
            says: "cannot read the file",
        },
    ]
}

#[test]
fn every_bad_file_ends_with_a_clear_message_and_exit_1() {
    let dir = tempfile::tempdir().unwrap();
    for case in cases() {
        let path: PathBuf = dir.path().join(case.file.0);
        std::fs::write(&path, &case.file.1).unwrap();
        let args: Vec<&str> = case
            .command
            .iter()
            .map(|a| if *a == "{}" { case.file.0 } else { a })
            .collect();
        let run = roughcal(dir.path(), &args);
        assert!(
            !run.stderr.contains("panicked") && !run.stdout.contains("panicked"),
            "{}: {}",
            case.what,
            run.stderr
        );
        assert_eq!(run.code, Some(1), "{}: {}", case.what, run.stderr);
        assert!(
            run.stdout.is_empty(),
            "{}: printed {}",
            case.what,
            run.stdout
        );
        assert!(
            run.stderr.contains(&case.place),
            "{}: expected `{}` in:\n{}",
            case.what,
            case.place,
            run.stderr
        );
        assert!(
            run.stderr.contains(case.says),
            "{}: expected `{}` in:\n{}",
            case.what,
            case.says,
            run.stderr
        );
    }
}
