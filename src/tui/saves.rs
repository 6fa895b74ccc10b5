//! Saves and the files another program changed: what the workbench does when a save lands, fails
//! or finds the file on disk changed, and when the user answers "reload theirs" or "keep both".

use std::path::PathBuf;

use crate::fieldtest::FieldSheet;
use crate::network::file::parse_network;
use crate::storage::FileStamp;

use super::app::{App, Confirm, Effect};
use super::session::{Conflict, FileState, SaveTarget};

/// Ctrl+Q: a half-typed cell or edits not on disk are never left without asking first.
pub(super) fn quit(app: &mut App, effects: &mut Vec<Effect>) {
    if matches!(
        app.confirm,
        Some(Confirm::QuitWithTyping | Confirm::QuitUnsaved)
    ) {
        return;
    }
    app.confirm = None;
    let typing = app
        .readings
        .edit
        .as_ref()
        .or(app.groups.edit.as_ref())
        .map(|e| e.input.buffer.clone());
    if let Some(typed) = typing {
        app.confirm = Some(Confirm::QuitWithTyping);
        app.error(format!(
            "a cell is half-typed (`{typed}`): y keeps it (saved) and quits, n goes back to it \
             (Esc there throws it away)"
        ));
        return;
    }
    if app.has_unsaved_edits() {
        let aside = [&app.sheet_conflict, &app.network_conflict]
            .into_iter()
            .flatten()
            .filter_map(|c| c.side_file.as_ref().ok())
            .map(|(path, _)| path.display().to_string())
            .collect::<Vec<_>>();
        let kept = if aside.is_empty() {
            "they exist only here".to_string()
        } else {
            format!("they are kept in {}", aside.join(", "))
        };
        app.confirm = Some(Confirm::QuitUnsaved);
        app.error(format!(
            "edits are NOT SAVED to the files they belong to ({kept}): quit anyway? (y/n)"
        ));
        return;
    }
    finish_quit(app, effects);
}

pub(super) fn finish_quit(app: &mut App, effects: &mut Vec<Effect>) {
    if app.fit.running.is_some() {
        effects.push(Effect::CancelCalibration);
    }
    app.quit = true;
}

/// The side file was written again (edits while a conflict waits for an answer).
pub(super) fn side_file_saved(
    app: &mut App,
    target: SaveTarget,
    result: Result<Option<FileStamp>, String>,
) {
    let conflict = match target {
        SaveTarget::Sheet => &mut app.sheet_conflict,
        SaveTarget::Network => &mut app.network_conflict,
    };
    match (conflict, result) {
        (
            Some(Conflict {
                side_file: Ok((_, stamp)),
            }),
            Ok(new),
        ) => *stamp = new,
        (_, Err(message)) => app.error(format!("NOT SAVED, not even aside: {message}")),
        _ => {}
    }
}

/// A save is done: the file's new stamp, or why nothing was written.
pub(super) fn save_finished(
    app: &mut App,
    target: SaveTarget,
    result: Result<Option<FileStamp>, String>,
    effects: &mut Vec<Effect>,
) {
    match result {
        Ok(stamp) => {
            app.save_failed = false;
            match target {
                SaveTarget::Sheet => {
                    app.unsaved = false;
                    app.session.sheet_file.stamp = stamp;
                    app.session.sheet_base = app.session.sheet.clone();
                }
                SaveTarget::Network => {
                    app.network_unsaved = false;
                    app.session.network_file.stamp = stamp;
                }
            }
        }
        Err(message) => {
            app.save_failed = true;
            let what = match target {
                SaveTarget::Sheet => "sheet",
                SaveTarget::Network => "network",
            };
            app.error(format!(
                "NOT SAVED: {message}; the {what} file is as before, the next edit saves again"
            ));
        }
    }
    if std::mem::take(&mut app.quit_after_saves) {
        quit(app, effects);
    }
}

/// A save found the file changed by another program: saving to it stops, our version is in the side
/// file (or only in memory), and the user is asked what to do.
pub(super) fn external_change(
    app: &mut App,
    target: SaveTarget,
    side_file: Result<(PathBuf, Option<FileStamp>), String>,
) {
    app.quit_after_saves = false;
    let path = match target {
        SaveTarget::Sheet => app.session.sheet_path.display().to_string(),
        SaveTarget::Network => app.session.network_path.display().to_string(),
    };
    let kept = match &side_file {
        Ok((side, _)) => format!("yours are kept in {}", side.display()),
        Err(e) => format!("yours are only in memory ({e})"),
    };
    let reload = match target {
        SaveTarget::Sheet => "reload theirs and re-apply yours where rows do not conflict",
        SaveTarget::Network => "reload theirs (your group edits stay in the side file)",
    };
    app.error(format!(
        "{path} was changed by another program since it was read: NOT SAVED, {kept}. y: {reload}; \
         n: keep both (you go on in the side file)"
    ));
    let conflict = Some(Conflict { side_file });
    match target {
        SaveTarget::Sheet => app.sheet_conflict = conflict,
        SaveTarget::Network => app.network_conflict = conflict,
    }
    app.confirm = Some(Confirm::ExternalChange(target));
}

/// "Keep both": the other program's file stays as it is, the workbench goes on with ours in the side
/// file.
pub(super) fn keep_both(app: &mut App, target: SaveTarget) {
    let conflict = match target {
        SaveTarget::Sheet => app.sheet_conflict.take(),
        SaveTarget::Network => app.network_conflict.take(),
    };
    let Some(Conflict {
        side_file: Ok((side, stamp)),
    }) = conflict
    else {
        // Nothing on disk holds our version: keep asking rather than pretend it is kept.
        app.error(
            "your edits could not be written aside: they are only in memory; free the folder and \
             edit again to retry",
        );
        return;
    };
    let file = FileState {
        read_only: false,
        stamp,
    };
    match target {
        SaveTarget::Sheet => {
            let theirs = std::mem::replace(&mut app.session.sheet_path, side.clone());
            app.session.sheet_file = file;
            app.session.sheet_base = app.session.sheet.clone();
            app.session.keep_original = false;
            app.unsaved = false;
            app.info(format!(
                "kept both: theirs in {}, yours in {} (edits now save there)",
                theirs.display(),
                side.display()
            ));
        }
        SaveTarget::Network => {
            let theirs = std::mem::replace(&mut app.session.network_path, side.clone());
            app.session.network_file = file;
            app.network_unsaved = false;
            app.info(format!(
                "kept both: theirs in {}, yours in {} (group edits now save there)",
                theirs.display(),
                side.display()
            ));
        }
    }
}

/// "Reload theirs": their sheet becomes the sheet, with our edited rows re-applied where they did not
/// touch the same row; the rows both changed keep their version (ours stays in the side file).
pub(super) fn sheet_reloaded(
    app: &mut App,
    result: Result<(FieldSheet, Option<FileStamp>), String>,
    effects: &mut Vec<Effect>,
) {
    let (theirs, stamp) = match result {
        Ok(read) => read,
        Err(message) => {
            app.error(format!(
                "cannot read the sheet again ({message}): nothing changed; y/n again"
            ));
            app.confirm = Some(Confirm::ExternalChange(SaveTarget::Sheet));
            return;
        }
    };
    let merged = super::merge::reapply(&app.session.sheet_base, &app.session.sheet, &theirs);
    let side = app
        .sheet_conflict
        .take()
        .and_then(|c| c.side_file.ok())
        .map(|(p, _)| p.display().to_string());
    app.session.sheet = merged.sheet;
    app.session.sheet_base = theirs;
    app.session.sheet_file.stamp = stamp;
    app.readings.reset_history();
    app.unsaved = false;
    app.scroll_readings();
    let mut message = format!(
        "reloaded the other program's sheet; re-applied {} of your row edits",
        merged.applied
    );
    if !merged.conflicts.is_empty() {
        message.push_str(&format!(
            "; rows changed on both sides keep theirs: {}{}",
            merged.conflicts.join(", "),
            side.map(|s| format!(" (yours are in {s})"))
                .unwrap_or_default()
        ));
    }
    if merged.applied > 0 {
        effects.extend(app.save_sheet());
    } else {
        app.readings.read_all(&app.session, &app.static_heads);
    }
    if merged.conflicts.is_empty() {
        app.info(message);
    } else {
        app.error(message);
    }
}

/// "Reload theirs" for the network: their text becomes the network; our group edits stay in the side
/// file (a network is not merged row by row).
pub(super) fn network_reloaded(app: &mut App, result: Result<(String, Option<FileStamp>), String>) {
    let (text, stamp) = match result {
        Ok(read) => read,
        Err(message) => {
            app.error(format!(
                "cannot read the network again ({message}): nothing changed; y/n again"
            ));
            app.confirm = Some(Confirm::ExternalChange(SaveTarget::Network));
            return;
        }
    };
    let name = app.session.network_path.display().to_string();
    match parse_network(&text, &name) {
        Ok(loaded) => {
            let side = app
                .network_conflict
                .take()
                .and_then(|c| c.side_file.ok())
                .map(|(p, _)| p.display().to_string());
            app.session.network = loaded.network;
            app.session.network_text = text;
            app.session.network_file.stamp = stamp;
            app.network_unsaved = false;
            app.groups.undo.clear();
            app.network_changed();
            app.readings.read_all(&app.session, &app.static_heads);
            app.fit.stale = app.fit.outcome.is_some();
            app.info(format!(
                "reloaded {name} as the other program left it{}",
                side.map(|s| format!("; your group edits are in {s}"))
                    .unwrap_or_default()
            ));
        }
        Err(e) => {
            app.error(format!(
                "their network does not read ({e}); kept yours: y/n again"
            ));
            app.confirm = Some(Confirm::ExternalChange(SaveTarget::Network));
        }
    }
}

/// The answer to the pending question.
pub(super) fn confirm(app: &mut App, yes: bool, effects: &mut Vec<Effect>) {
    let Some(question) = app.confirm.take() else {
        return;
    };
    if !yes {
        match question {
            Confirm::ExternalChange(target) => keep_both(app, target),
            Confirm::QuitWithTyping | Confirm::QuitUnsaved => app.info("not quitting: carry on"),
            _ => app.info("cancelled"),
        }
        return;
    }
    match question {
        Confirm::DeleteRow(row) => {
            effects.extend(app.with_view(|ctx, v| v.readings.delete_row(ctx, row)));
        }
        Confirm::OverwriteExport(folder) => {
            // The question was about this folder: the forced export goes there and nowhere else.
            effects.extend(app.with_view(|ctx, v| v.fit.export(ctx, true, Some(folder))));
        }
        Confirm::ExportOutOfDate => app.fit.export_out_of_date_anyway(),
        Confirm::ExternalChange(target) => {
            let path = match target {
                SaveTarget::Sheet => app.session.sheet_path.clone(),
                SaveTarget::Network => app.session.network_path.clone(),
            };
            app.info(format!("reading {} again...", path.display()));
            effects.push(match target {
                SaveTarget::Sheet => Effect::ReloadSheet(path),
                SaveTarget::Network => Effect::ReloadNetwork(path),
            });
        }
        Confirm::QuitWithTyping => {
            let before = effects.len();
            super::app::commit_pending(app, effects);
            if effects.len() == before {
                quit(app, effects);
            } else {
                // The typing is kept; quitting goes on once its save has landed (or asks again).
                app.quit_after_saves = true;
            }
        }
        Confirm::QuitUnsaved => finish_quit(app, effects),
    }
}
