//! A small table of text cells, rendered either as aligned plain text (terminal) or as a Markdown pipe
//! table (report), so both outputs show the same rows.

/// How a column's cells line up.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Align {
    Left,
    Right,
}

/// Rows of text cells under named columns, each column as wide as its widest cell.
#[derive(Debug, Clone)]
pub struct TextTable {
    headers: Vec<String>,
    align: Vec<Align>,
    rows: Vec<Vec<String>>,
    /// The last column holds running text (findings, lists) whose rule stops at its header.
    free_text_last: bool,
}

impl TextTable {
    /// An empty table with these column headers and alignments.
    pub fn new(columns: &[(&str, Align)]) -> Self {
        Self {
            headers: columns.iter().map(|c| c.0.to_string()).collect(),
            align: columns.iter().map(|c| c.1).collect(),
            rows: Vec::new(),
            free_text_last: false,
        }
    }

    /// Marks the last column as running text: in plain text its rule is only as wide as its header, so
    /// one long finding does not draw a line across the screen.
    pub fn free_text_last(mut self) -> Self {
        self.free_text_last = true;
        self
    }

    /// Adds a row; missing cells are blank, extra cells are dropped.
    pub fn row(&mut self, mut cells: Vec<String>) {
        cells.resize(self.headers.len(), String::new());
        self.rows.push(cells);
    }

    fn widths(&self) -> Vec<usize> {
        (0..self.headers.len())
            .map(|i| {
                self.rows
                    .iter()
                    .map(|r| r[i].chars().count())
                    .chain(std::iter::once(self.headers[i].chars().count()))
                    .max()
                    .unwrap_or(0)
            })
            .collect()
    }

    fn pad(text: &str, width: usize, align: Align) -> String {
        match align {
            Align::Left => format!("{text:<width$}"),
            Align::Right => format!("{text:>width$}"),
        }
    }

    fn line(&self, cells: &[String], widths: &[usize], separator: &str) -> String {
        cells
            .iter()
            .zip(widths)
            .zip(&self.align)
            .map(|((cell, &w), &a)| Self::pad(cell, w, a))
            .collect::<Vec<_>>()
            .join(separator)
    }

    /// Plain text: header, a rule of dashes, rows; every line starts with `indent`.
    pub fn text(&self, indent: &str) -> String {
        let widths = self.widths();
        let mut out = String::new();
        // A column without a header (flags such as NEGATIVE) gets no rule either.
        let last = widths.len().saturating_sub(1);
        let rule: Vec<String> = widths
            .iter()
            .zip(&self.headers)
            .enumerate()
            .map(|(i, (&w, h))| {
                let w = if self.free_text_last && i == last {
                    h.chars().count()
                } else {
                    w
                };
                "-".repeat(if h.is_empty() { 0 } else { w })
            })
            .collect();
        for cells in std::iter::once(&self.headers)
            .chain(std::iter::once(&rule))
            .chain(&self.rows)
        {
            out.push_str(indent);
            out.push_str(self.line(cells, &widths, "  ").trim_end());
            out.push('\n');
        }
        out
    }

    /// A Markdown pipe table, padded so it also reads well as plain text.
    pub fn markdown(&self) -> String {
        let widths: Vec<usize> = self.widths().into_iter().map(|w| w.max(3)).collect();
        let escape = |cells: &[String]| -> Vec<String> {
            cells.iter().map(|c| c.replace('|', "\\|")).collect()
        };
        let mut out = String::new();
        let mut push = |cells: &[String]| {
            out.push_str("| ");
            out.push_str(&self.line(&escape(cells), &widths, " | "));
            out.push_str(" |\n");
        };
        push(&self.headers);
        let rule: Vec<String> = widths
            .iter()
            .zip(&self.align)
            .map(|(&w, a)| match a {
                Align::Left => format!(":{}", "-".repeat(w - 1)),
                Align::Right => format!("{}:", "-".repeat(w - 1)),
            })
            .collect();
        push(&rule);
        for row in &self.rows {
            push(row);
        }
        out
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn columns_line_up_in_text_and_markdown() {
        let mut table = TextTable::new(&[("group", Align::Left), ("C", Align::Right)]);
        table.row(vec!["ci-1950".into(), "72.4".into()]);
        table.row(vec!["di".into(), "118.0".into()]);
        let text = table.text("  ");
        let lines: Vec<&str> = text.lines().collect();
        assert_eq!(lines[0], "  group        C");
        assert_eq!(lines[2], "  ci-1950   72.4");
        assert_eq!(lines[3], "  di       118.0");
        let markdown = table.markdown();
        assert!(markdown.starts_with("| group   |     C |\n| :------ | ----: |\n"));
        assert!(markdown.contains("| di      | 118.0 |"));
    }

    #[test]
    fn free_text_and_headerless_columns_draw_short_rules() {
        let mut table = TextTable::new(&[("id", Align::Left), ("", Align::Left)]);
        table.row(vec!["J-1".into(), "NEGATIVE".into()]);
        assert_eq!(table.text(""), "id\n---\nJ-1  NEGATIVE\n");
        let mut table =
            TextTable::new(&[("id", Align::Left), ("notes", Align::Left)]).free_text_last();
        table.row(vec!["J-1".into(), "a long note on this junction".into()]);
        assert_eq!(
            table.text(""),
            "id   notes\n---  -----\nJ-1  a long note on this junction\n"
        );
    }
}
