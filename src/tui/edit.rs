//! Typing: the one text input behind every cell edit and prompt of the workbench.

use super::app::Action;

/// A cursor movement.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Move {
    Up,
    Down,
    Left,
    Right,
    PageUp,
    PageDown,
    /// First column (or first character in an edit).
    Home,
    /// Last column (or last character in an edit).
    End,
    Top,
    Bottom,
}

/// Where the cursor goes after a committed edit.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum After {
    Up,
    Down,
    Right,
    Left,
    Stay,
}

/// A line of text being typed, with its cursor.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct TextInput {
    pub buffer: String,
    /// Cursor position in characters.
    pub cursor: usize,
}

impl TextInput {
    /// An input holding `text`, the cursor after its last character.
    pub fn new(text: &str) -> Self {
        Self {
            buffer: text.to_string(),
            cursor: text.chars().count(),
        }
    }

    fn byte_at(&self, chars: usize) -> usize {
        self.buffer
            .char_indices()
            .nth(chars)
            .map_or(self.buffer.len(), |(i, _)| i)
    }

    /// Replaces the text, the cursor at its end.
    pub fn set(&mut self, text: String) {
        self.cursor = text.chars().count();
        self.buffer = text;
    }

    /// Applies a typing action (insert, erase, move in the text); returns whether it was one.
    pub fn apply(&mut self, action: &Action) -> bool {
        match action {
            Action::InsertChar(c) => {
                let at = self.byte_at(self.cursor);
                self.buffer.insert(at, *c);
                self.cursor += 1;
            }
            Action::DeleteBack => {
                if self.cursor > 0 {
                    self.cursor -= 1;
                    let at = self.byte_at(self.cursor);
                    self.buffer.remove(at);
                }
            }
            Action::DeleteForward => {
                if self.cursor < self.buffer.chars().count() {
                    let at = self.byte_at(self.cursor);
                    self.buffer.remove(at);
                }
            }
            Action::EditCursor(m) => {
                let len = self.buffer.chars().count();
                self.cursor = match m {
                    Move::Left => self.cursor.saturating_sub(1),
                    Move::Right => (self.cursor + 1).min(len),
                    Move::Home => 0,
                    Move::End => len,
                    _ => self.cursor,
                };
            }
            _ => return false,
        }
        true
    }
}

/// A table cell being typed.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CellEdit {
    pub row: usize,
    /// Header index (readings) or table column (groups).
    pub column: usize,
    pub input: TextInput,
}

impl CellEdit {
    pub fn new(row: usize, column: usize, text: &str) -> Self {
        Self {
            row,
            column,
            input: TextInput::new(text),
        }
    }
}
