//! Keys to actions, per view and mode. The one place that knows which key does what; the help overlay
//! lists [`KEY_HELP`], kept beside the code it describes.

use crossterm::event::{KeyCode, KeyEvent, KeyEventKind, KeyModifiers};

use super::app::{Action, After, App, Confirm, Move, View};

/// Every key, grouped for the help overlay: (section, [(keys, what they do)]). The first two sections
/// fill the left column, the rest the right one; each description fits 25 characters.
pub const KEY_HELP: [(&str, &[(&str, &str)]); 6] = [
    (
        "Everywhere",
        &[
            ("? F1", "keys (Esc or q closes)"),
            ("F2 .. F5", "Readings Groups Fit Map"),
            ("Alt+1 .. 4", "same; 1 .. 4 in Fit, Map"),
            ("Ctrl+R", "run the fit"),
            ("Esc", "cancel fit/question/edit"),
            ("Ctrl+E", "export (asks the folder)"),
            ("Ctrl+Q Ctrl+C", "quit (all is saved)"),
        ],
    ),
    (
        "Readings",
        &[
            ("arrows", "move (letters type)"),
            ("PgUp PgDn", "page up / down"),
            ("Home End", "column; with Ctrl: row"),
            ("type, Enter", "edit the cell"),
            ("Tab Shift+Tab", "next / previous column"),
            ("Ctrl+N Insert", "add a row below"),
            ("Bksp Delete", "clear the cell (undo)"),
            ("Ctrl+D", "delete the row (y/n)"),
            ("Ctrl+Z Ctrl+Y", "undo / redo"),
        ],
    ),
    (
        "Typing a cell",
        &[
            ("Enter", "keep it, go down"),
            ("Tab", "complete id / keep, right"),
            ("S-Tab Up Down", "keep, go left / up / down"),
            ("Esc", "throw the typing away"),
            ("<- -> Bksp", "move and erase in it"),
        ],
    ),
    (
        "Groups",
        &[
            ("arrows hjkl", "start C, min, max, lock"),
            ("Enter digits", "edit (saved to network)"),
            ("Space", "lock / unlock the group"),
            ("Ctrl+Z Ctrl+Y", "undo / redo a group edit"),
        ],
    ),
    ("Fit", &[("Up Down j k", "scroll the tests")]),
    (
        "Map",
        &[
            ("arrows n p", "next / previous test"),
            ("s", "shade: group / C change"),
        ],
    ),
];

/// The few keys that matter now, for the status line.
pub fn key_hints(app: &App) -> &'static [(&'static str, &'static str)] {
    match app.confirm {
        Some(Confirm::ExternalChange(_)) => {
            return &[("y", "reload theirs, re-apply mine"), ("n", "keep both")];
        }
        Some(Confirm::QuitWithTyping) => {
            return &[("y", "keep the typing, quit"), ("n", "back to it")];
        }
        Some(Confirm::QuitUnsaved) => return &[("y", "quit anyway"), ("n", "stay")],
        Some(Confirm::ExportOutOfDate) => return &[("y", "export the old fit"), ("n", "cancel")],
        Some(_) => return &[("y", "yes"), ("n", "no")],
        None => {}
    }
    if app.help {
        return &[("Esc", "close help")];
    }
    if app.fit.export_prompt.is_some() {
        return &[("Enter", "export"), ("Esc", "cancel")];
    }
    if app.readings.edit.is_some() || app.groups.edit.is_some() {
        return &[
            ("Enter", "keep"),
            ("Tab", "next"),
            ("Esc", "cancel"),
            ("?", "help"),
        ];
    }
    if app.fit.running.is_some() {
        return &[("Esc", "cancel fit"), ("F2-F5", "views"), ("?", "help")];
    }
    match app.view {
        View::Readings => &[
            ("type", "edit"),
            ("^N", "add row"),
            ("^D", "del row"),
            ("^Z/^Y", "undo/redo"),
            ("^R", "fit"),
            ("F2-F5", "views"),
            ("?", "help"),
        ],
        View::Groups => &[
            ("Enter", "edit"),
            ("Space", "lock"),
            ("^Z/^Y", "undo/redo"),
            ("^R", "fit"),
            ("F2-F5", "views"),
            ("?", "help"),
        ],
        View::Fit => &[
            ("^R", "fit"),
            ("^E", "export"),
            ("j/k", "scroll"),
            ("F2-F5", "views"),
            ("?", "help"),
        ],
        View::Map => &[
            ("n/p", "test"),
            ("s", "shading"),
            ("^R", "fit"),
            ("F2-F5", "views"),
            ("?", "help"),
        ],
    }
}

/// The arrow and paging keys as moves.
fn arrow(code: KeyCode) -> Option<Move> {
    Some(match code {
        KeyCode::Up => Move::Up,
        KeyCode::Down => Move::Down,
        KeyCode::Left => Move::Left,
        KeyCode::Right => Move::Right,
        KeyCode::PageUp => Move::PageUp,
        KeyCode::PageDown => Move::PageDown,
        KeyCode::Home => Move::Home,
        KeyCode::End => Move::End,
        _ => return None,
    })
}

/// The arrows and the vim letters, where nothing is typed.
fn vertical_or_horizontal(code: KeyCode) -> Option<Move> {
    if let Some(m) = arrow(code) {
        return Some(m);
    }
    Some(match code {
        KeyCode::Char('h') => Move::Left,
        KeyCode::Char('j') => Move::Down,
        KeyCode::Char('k') => Move::Up,
        KeyCode::Char('l') => Move::Right,
        _ => return None,
    })
}

/// The action of a key press in the current state, if any.
pub fn action_for_key(app: &App, key: KeyEvent) -> Option<Action> {
    if key.kind == KeyEventKind::Release {
        return None;
    }
    let ctrl = key.modifiers.contains(KeyModifiers::CONTROL);
    let alt = key.modifiers.contains(KeyModifiers::ALT);
    if ctrl {
        match key.code {
            KeyCode::Char('q' | 'c') => return Some(Action::Quit),
            _ if app.confirm.is_some() => return None,
            KeyCode::Char('r') => return Some(Action::RunCalibration),
            KeyCode::Char('e') => return Some(Action::Export),
            KeyCode::Home => return Some(Action::MoveCursor(Move::Top)),
            KeyCode::End => return Some(Action::MoveCursor(Move::Bottom)),
            _ => {}
        }
    }
    if app.confirm.is_some() {
        return match key.code {
            KeyCode::Char('y' | 'Y') => Some(Action::Confirm(true)),
            KeyCode::Char('n' | 'N') | KeyCode::Esc => Some(Action::Confirm(false)),
            _ => None,
        };
    }
    if app.help {
        return match key.code {
            KeyCode::Esc | KeyCode::Char('?') | KeyCode::Char('q') => Some(Action::ToggleHelp),
            _ => None,
        };
    }
    let view_key = match key.code {
        KeyCode::F(n @ 2..=5) => Some(View::ALL[usize::from(n) - 2]),
        KeyCode::Char(c @ '1'..='4') if alt => Some(View::ALL[(c as usize) - ('1' as usize)]),
        _ => None,
    };
    if let Some(view) = view_key {
        return Some(Action::SwitchView(view));
    }
    if app.readings.edit.is_some() || app.groups.edit.is_some() || app.fit.export_prompt.is_some() {
        return editing_key(app, key, ctrl);
    }
    if key.code == KeyCode::Esc {
        return Some(Action::Escape);
    }
    if key.code == KeyCode::Char('?') || key.code == KeyCode::F(1) {
        return Some(Action::ToggleHelp);
    }
    match app.view {
        View::Readings => readings_key(key, ctrl, alt),
        View::Groups => groups_key(key, ctrl, alt),
        View::Fit | View::Map => other_key(app.view, key, ctrl, alt),
    }
}

fn editing_key(app: &App, key: KeyEvent, ctrl: bool) -> Option<Action> {
    if ctrl {
        return None;
    }
    Some(match key.code {
        KeyCode::Enter => Action::CommitEdit(After::Down),
        KeyCode::Tab if app.readings.edit.is_some() => Action::CompleteOrCommit,
        KeyCode::Tab => Action::CommitEdit(After::Right),
        KeyCode::BackTab => Action::CommitEdit(After::Left),
        KeyCode::Up => Action::CommitEdit(After::Up),
        KeyCode::Down => Action::CommitEdit(After::Down),
        KeyCode::Esc => Action::CancelEdit,
        KeyCode::Backspace => Action::DeleteBack,
        KeyCode::Delete => Action::DeleteForward,
        KeyCode::Left => Action::EditCursor(Move::Left),
        KeyCode::Right => Action::EditCursor(Move::Right),
        KeyCode::Home => Action::EditCursor(Move::Home),
        KeyCode::End => Action::EditCursor(Move::End),
        KeyCode::Char(c) => Action::InsertChar(c),
        _ => return None,
    })
}

fn readings_key(key: KeyEvent, ctrl: bool, alt: bool) -> Option<Action> {
    if ctrl {
        return match key.code {
            KeyCode::Char('z') => Some(Action::Undo),
            KeyCode::Char('y') => Some(Action::Redo),
            KeyCode::Char('n') => Some(Action::AddRow),
            KeyCode::Char('d') => Some(Action::DeleteRow),
            _ => None,
        };
    }
    if alt {
        return None;
    }
    match key.code {
        KeyCode::Insert => return Some(Action::AddRow),
        KeyCode::Delete | KeyCode::Backspace => return Some(Action::ClearCell),
        KeyCode::Enter | KeyCode::Char(' ') => return Some(Action::BeginEdit),
        KeyCode::Tab => return Some(Action::MoveCursor(Move::Right)),
        KeyCode::BackTab => return Some(Action::MoveCursor(Move::Left)),
        _ => {}
    }
    // Only the arrows move here: every printable character (h, j, k and l too) starts typing.
    if let Some(m) = arrow(key.code) {
        return Some(Action::MoveCursor(m));
    }
    match key.code {
        KeyCode::Char(c) if !c.is_control() => Some(Action::BeginEditWith(c)),
        _ => None,
    }
}

fn groups_key(key: KeyEvent, ctrl: bool, alt: bool) -> Option<Action> {
    if ctrl {
        return match key.code {
            KeyCode::Char('z') => Some(Action::Undo),
            KeyCode::Char('y') => Some(Action::Redo),
            _ => None,
        };
    }
    if alt {
        return None;
    }
    if let Some(m) = vertical_or_horizontal(key.code) {
        return Some(Action::MoveCursor(m));
    }
    match key.code {
        KeyCode::Enter => Some(Action::BeginEdit),
        KeyCode::Char(' ') => Some(Action::ToggleLock),
        KeyCode::Tab => Some(Action::MoveCursor(Move::Right)),
        KeyCode::BackTab => Some(Action::MoveCursor(Move::Left)),
        KeyCode::Char(c) if c.is_ascii_digit() || c == '.' => Some(Action::BeginEditWith(c)),
        _ => None,
    }
}

fn number_view(code: KeyCode) -> Option<View> {
    match code {
        KeyCode::Char(c @ '1'..='4') => Some(View::ALL[(c as usize) - ('1' as usize)]),
        _ => None,
    }
}

fn other_key(view: View, key: KeyEvent, ctrl: bool, alt: bool) -> Option<Action> {
    if ctrl || alt {
        return None;
    }
    if let Some(view) = number_view(key.code) {
        return Some(Action::SwitchView(view));
    }
    match (view, key.code) {
        (View::Map, KeyCode::Char('s')) => Some(Action::ToggleMapShading),
        (View::Map, KeyCode::Char('n')) => Some(Action::SelectTest(1)),
        (View::Map, KeyCode::Char('p')) => Some(Action::SelectTest(-1)),
        _ => vertical_or_horizontal(key.code).map(Action::MoveCursor),
    }
}
