//! One bounded undo/redo history, used for sheet edits and for group edits alike.

use std::collections::VecDeque;

/// Undoable steps, newest last, at most `depth` of them (the oldest is forgotten first).
#[derive(Debug, Clone)]
pub struct UndoStack<T> {
    undo: VecDeque<T>,
    redo: Vec<T>,
    depth: usize,
}

impl<T> Default for UndoStack<T> {
    fn default() -> Self {
        Self::new(UNDO_DEPTH)
    }
}

/// How many edits can be undone. Group edits keep whole network texts (an edit goes through the
/// format-preserving TOML writer); a hundred copies of a 20,000-pipe file are a few hundred MB at worst.
pub const UNDO_DEPTH: usize = 100;

impl<T> UndoStack<T> {
    pub fn new(depth: usize) -> Self {
        Self {
            undo: VecDeque::new(),
            redo: Vec::new(),
            depth: depth.max(1),
        }
    }

    /// A new edit: it can be undone, and nothing undone before can be redone any more.
    pub fn record(&mut self, step: T) {
        self.push_undo(step);
        self.redo.clear();
    }

    /// The newest step to undo.
    pub fn pop_undo(&mut self) -> Option<T> {
        self.undo.pop_back()
    }

    /// The newest step undone, to redo.
    pub fn pop_redo(&mut self) -> Option<T> {
        self.redo.pop()
    }

    /// A step just undone: it can be redone.
    pub fn push_redo(&mut self, step: T) {
        self.redo.push(step);
    }

    /// A step just redone (or recorded): it can be undone again.
    pub fn push_undo(&mut self, step: T) {
        if self.undo.len() == self.depth {
            self.undo.pop_front();
        }
        self.undo.push_back(step);
    }

    /// Forgets everything (after the file was replaced from disk).
    pub fn clear(&mut self) {
        self.undo.clear();
        self.redo.clear();
    }

    /// Whether there is nothing to undo and nothing to redo.
    pub fn is_empty(&self) -> bool {
        self.undo.is_empty() && self.redo.is_empty()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_oldest_step_is_forgotten_past_the_depth_and_a_new_edit_clears_redo() {
        let mut stack = UndoStack::new(2);
        stack.record(1);
        stack.record(2);
        stack.record(3);
        assert_eq!(stack.pop_undo(), Some(3));
        stack.push_redo(3);
        assert_eq!(stack.pop_undo(), Some(2));
        assert_eq!(stack.pop_undo(), None);
        stack.record(4);
        assert_eq!(stack.pop_redo(), None);
        assert_eq!(stack.pop_undo(), Some(4));
        assert!(stack.is_empty());
    }
}
