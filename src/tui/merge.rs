//! Re-applying the workbench's row edits onto a sheet another program changed: a three-way merge by
//! rows, with the sheet as last read or written as the common ancestor.
//!
//! Rows are matched by their test id (and, for an id used more than once, by its occurrence), so a row
//! the other program moved or that rows inserted above it shifted is still the same test. A row we
//! changed is re-applied when the other program left it as it was; when both changed it, theirs is
//! kept and the row is reported as a conflict.

use std::collections::HashMap;

use crate::fieldtest::{FieldSheet, SheetColumn};

/// Their sheet with our edits re-applied.
#[derive(Debug, Clone)]
pub struct Merge {
    pub sheet: FieldSheet,
    /// Rows of ours written into theirs (changed, added or deleted).
    pub applied: usize,
    /// Test ids of the rows both sides changed differently (theirs kept).
    pub conflicts: Vec<String>,
}

type Key = (String, usize);

/// Every row of `sheet` by key: (test id, occurrence of that id so far).
fn keyed(sheet: &FieldSheet) -> Vec<(Key, Vec<String>)> {
    let mut seen: HashMap<String, usize> = HashMap::new();
    (0..sheet.row_count())
        .filter_map(|row| {
            let cells: Vec<String> = sheet
                .row_cells(row)?
                .into_iter()
                .map(str::to_string)
                .collect();
            let id = sheet
                .cell(row, SheetColumn::Test)
                .unwrap_or("")
                .trim()
                .to_string();
            let n = seen.entry(id.clone()).or_default();
            *n += 1;
            Some(((id, *n), cells))
        })
        .collect()
}

fn row_of(sheet: &FieldSheet, key: &Key) -> Option<usize> {
    keyed(sheet).iter().position(|(k, _)| k == key)
}

fn shown(key: &Key) -> String {
    if key.0.is_empty() {
        "(a row with no id)".to_string()
    } else {
        key.0.clone()
    }
}

/// `theirs` with the rows `mine` changed since `base` re-applied where `theirs` left them as in `base`.
/// Sheets with different headers are not merged row by row: every row we changed is a conflict.
pub fn reapply(base: &FieldSheet, mine: &FieldSheet, theirs: &FieldSheet) -> Merge {
    let mut sheet = theirs.clone();
    let mut applied = 0;
    let mut conflicts = Vec::new();
    let base_rows: HashMap<Key, Vec<String>> = keyed(base).into_iter().collect();
    let mine_rows = keyed(mine);
    let mine_keys: HashMap<&Key, &Vec<String>> = mine_rows.iter().map(|(k, c)| (k, c)).collect();
    let same_header = base.headers() == mine.headers() && mine.headers() == theirs.headers();
    let their_rows: HashMap<Key, Vec<String>> = keyed(theirs).into_iter().collect();

    for (key, cells) in &mine_rows {
        let before = base_rows.get(key);
        if before == Some(cells) {
            continue;
        }
        let now = their_rows.get(key);
        if now == Some(cells) {
            continue;
        }
        if !same_header || now != before {
            conflicts.push(shown(key));
            continue;
        }
        let written = match row_of(&sheet, key) {
            Some(row) => sheet
                .delete_row(row)
                .and_then(|_| sheet.insert_row_cells(row, cells.clone())),
            None => sheet.insert_row_cells(sheet.row_count(), cells.clone()),
        };
        match written {
            Ok(()) => applied += 1,
            Err(_) => conflicts.push(shown(key)),
        }
    }
    // Rows we deleted go from theirs too, where they left them as they were.
    let mut deleted: Vec<&Key> = base_rows
        .keys()
        .filter(|key| !mine_keys.contains_key(key))
        .collect();
    deleted.sort();
    for key in deleted {
        match (their_rows.get(key), base_rows.get(key)) {
            (None, _) => {}
            (now, before) if now == before && same_header => {
                if let Some(row) = row_of(&sheet, key)
                    && sheet.delete_row(row).is_ok()
                {
                    applied += 1;
                }
            }
            _ => conflicts.push(shown(key)),
        }
    }
    Merge {
        sheet,
        applied,
        conflicts,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const HEADER: &str = "test,residual_node,flow_node,static_psi,residual_psi,flow_gpm\n";

    fn sheet(rows: &str) -> FieldSheet {
        FieldSheet::parse(&format!("{HEADER}{rows}"), "s.csv").unwrap()
    }

    #[test]
    fn our_rows_go_into_theirs_unless_both_changed_them() {
        let base = sheet("A,J-1,J-2,60,40,500\nB,J-1,J-2,61,41,500\nC,J-1,J-2,62,42,500\n");
        // Ours: A edited, C deleted, D added.
        let mine = sheet("A,J-1,J-2,60,45,500\nB,J-1,J-2,61,41,500\nD,J-3,J-4,63,43,500\n");
        // Theirs: a row inserted at the top, B edited; A and C as they were.
        let theirs = sheet(
            "Z,J-9,J-8,70,50,500\nA,J-1,J-2,60,40,500\nB,J-1,J-2,61,49,500\nC,J-1,J-2,62,42,500\n",
        );
        let merged = reapply(&base, &mine, &theirs);
        assert_eq!(merged.applied, 3);
        assert!(merged.conflicts.is_empty());
        assert_eq!(
            merged.sheet.to_csv_string(),
            format!(
                "{HEADER}Z,J-9,J-8,70,50,500\nA,J-1,J-2,60,45,500\nB,J-1,J-2,61,49,500\nD,J-3,J-4,63,43,500\n"
            )
        );
        // Both changed A: theirs stays, A is reported.
        let theirs_too = sheet("A,J-1,J-2,60,41,500\nB,J-1,J-2,61,41,500\nC,J-1,J-2,62,42,500\n");
        let merged = reapply(&base, &mine, &theirs_too);
        assert_eq!(merged.conflicts, vec!["A".to_string()]);
        assert_eq!(merged.sheet.cell(0, SheetColumn::Residual), Some("41"));
    }
}
