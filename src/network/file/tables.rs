//! The parsed tables the loader walks: keys and values with the byte spans of their text, in the
//! order the file writes them.
//!
//! Most of a city-sized file is plain TOML: `[[section]]` headers and `key = value` lines whose
//! values are numbers, short strings, booleans and one-line arrays or inline tables. [`read_plain`]
//! reads exactly that subset straight into [`Table`]s, at a few times the speed of a general TOML
//! parser and with lookups that are a short scan rather than a tree search. Anything outside the
//! subset (escapes, literal or multi-line strings, exponents, underscores, dates, dotted keys, a
//! duplicate key, a syntax error) makes it return `None`, and the piece is parsed by the `toml` crate
//! and converted with [`Table::from_toml`], so the loader sees the same tables, with the same spans,
//! either way (a unit test compares the two on whole files).

use std::borrow::Cow;
use std::ops::Range;

use toml::Spanned;
use toml::de::{DeTable, DeValue};

/// A key with the span of its text (quotes included).
pub(super) type Key<'t> = Spanned<Cow<'t, str>>;

/// A TOML table, its entries in file order.
#[derive(Debug, Clone, Default)]
pub(super) struct Table<'t> {
    entries: Vec<(Key<'t>, Spanned<Value<'t>>)>,
}

/// A TOML value. Numbers keep whether they fit (`None`: written as a number but not one an `i64` or
/// `f64` holds), so that the loader can say what it found.
#[derive(Debug, Clone)]
pub(super) enum Value<'t> {
    String(Cow<'t, str>),
    Integer(Option<i64>),
    Float(Option<f64>),
    Boolean(bool),
    Datetime,
    Array(Vec<Spanned<Value<'t>>>),
    Table(Table<'t>),
}

impl<'t> Table<'t> {
    /// The entry of `key`: a scan, which for the handful of keys of an entry beats any map.
    pub(super) fn get_key_value(&self, key: &str) -> Option<(&Key<'t>, &Spanned<Value<'t>>)> {
        self.entries
            .iter()
            .find(|(name, _)| same_key(name.get_ref(), key))
            .map(|(name, value)| (name, value))
    }

    pub(super) fn contains_key(&self, key: &str) -> bool {
        self.get_key_value(key).is_some()
    }

    /// The entries in file order.
    pub(super) fn iter(&self) -> impl Iterator<Item = (&Key<'t>, &Spanned<Value<'t>>)> {
        self.entries.iter().map(|(name, value)| (name, value))
    }

    /// A table parsed by the `toml` crate, its entries put in file order.
    pub(super) fn from_toml(table: DeTable<'t>) -> Self {
        let mut entries: Vec<_> = table
            .into_iter()
            .map(|(key, value)| {
                let span = value.span();
                (
                    key,
                    Spanned::new(span, Value::from_toml(value.into_inner())),
                )
            })
            .collect();
        entries.sort_by_key(|(key, _)| key.span().start);
        Self { entries }
    }
}

impl<'t> Value<'t> {
    fn from_toml(value: DeValue<'t>) -> Self {
        match value {
            DeValue::String(text) => Self::String(text),
            DeValue::Integer(integer) => {
                Self::Integer(i64::from_str_radix(integer.as_str(), integer.radix()).ok())
            }
            DeValue::Float(float) => Self::Float(float.as_str().parse::<f64>().ok()),
            DeValue::Boolean(flag) => Self::Boolean(flag),
            DeValue::Datetime(_) => Self::Datetime,
            DeValue::Array(array) => Self::Array(
                array
                    .into_iter()
                    .map(|element| {
                        let span = element.span();
                        Spanned::new(span, Self::from_toml(element.into_inner()))
                    })
                    .collect(),
            ),
            DeValue::Table(table) => Self::Table(Table::from_toml(table)),
        }
    }

    pub(super) fn as_str(&self) -> Option<&str> {
        match self {
            Self::String(text) => Some(text),
            _ => None,
        }
    }

    pub(super) fn as_bool(&self) -> Option<bool> {
        match self {
            Self::Boolean(flag) => Some(*flag),
            _ => None,
        }
    }

    pub(super) fn as_array(&self) -> Option<&[Spanned<Value<'t>>]> {
        match self {
            Self::Array(elements) => Some(elements),
            _ => None,
        }
    }

    /// The value as a number, integers widened to `f64`.
    pub(super) fn as_number(&self) -> Option<f64> {
        match self {
            Self::Integer(integer) => integer.map(|i| i as f64),
            Self::Float(float) => *float,
            _ => None,
        }
    }
}

/// Whether two keys are equal. Keys of up to eight bytes (nearly all) are compared as one word
/// rather than through a call to `memcmp`: a city file compares a few million keys.
pub(super) fn same_key(a: &str, b: &str) -> bool {
    fn word(bytes: &[u8]) -> u64 {
        bytes
            .iter()
            .fold(0, |word, &byte| (word << 8) | u64::from(byte))
    }
    if a.len() != b.len() {
        return false;
    }
    if a.len() <= 8 {
        word(a.as_bytes()) == word(b.as_bytes())
    } else {
        a == b
    }
}

/// Reads a plain piece of a network file: the top level (`section` `None`: only `key = value` lines)
/// or a run of `[[section]]` entries, as the `toml` crate would parse it (a table holding the array
/// of entries). `None` when the piece leaves the plain subset, see the module doc.
pub(super) fn read_plain<'t>(text: &'t str, section: Option<&str>) -> Option<Table<'t>> {
    let mut scanner = Scanner { text, pos: 0 };
    match section {
        None => {
            let table = scanner.key_value_lines()?;
            scanner.at_end().then_some(table)
        }
        Some(section) => scanner.run(section),
    }
}

struct Scanner<'t> {
    text: &'t str,
    pos: usize,
}

/// Whether a byte may stand in a comment or a basic string: TOML allows tab and no other control
/// character (bytes of multi-byte characters are all above 0x7f).
fn printable(byte: u8) -> bool {
    byte == b'\t' || (byte >= 0x20 && byte != 0x7f)
}

fn bare_key_byte(byte: u8) -> bool {
    byte.is_ascii_alphanumeric() || byte == b'_' || byte == b'-'
}

impl<'t> Scanner<'t> {
    fn peek(&self) -> Option<u8> {
        self.text.as_bytes().get(self.pos).copied()
    }

    fn at_end(&self) -> bool {
        self.pos >= self.text.len()
    }

    fn eat(&mut self, expected: &str) -> bool {
        let found = self
            .text
            .get(self.pos..)
            .is_some_and(|rest| rest.starts_with(expected));
        if found {
            self.pos += expected.len();
        }
        found
    }

    fn slice(&self, span: Range<usize>) -> Option<&'t str> {
        self.text.get(span)
    }

    fn skip_spaces(&mut self) {
        while matches!(self.peek(), Some(b' ' | b'\t')) {
            self.pos += 1;
        }
    }

    /// A comment (if any) and the end of the line (or of the text).
    fn end_of_line(&mut self) -> Option<()> {
        self.skip_spaces();
        if self.peek() == Some(b'#') {
            while let Some(byte) = self.peek() {
                if byte == b'\n' || byte == b'\r' {
                    break;
                }
                if !printable(byte) {
                    return None;
                }
                self.pos += 1;
            }
        }
        match self.peek() {
            None => Some(()),
            Some(b'\n') => {
                self.pos += 1;
                Some(())
            }
            Some(b'\r') if self.eat("\r\n") => Some(()),
            _ => None,
        }
    }

    /// Skips blank and comment-only lines, stopping at the start of the next line that holds
    /// something (or at the end).
    fn skip_blank_lines(&mut self) -> Option<()> {
        loop {
            let line_start = self.pos;
            self.skip_spaces();
            match self.peek() {
                None => return Some(()),
                Some(b'#' | b'\n' | b'\r') => self.end_of_line()?,
                Some(_) => {
                    self.pos = line_start;
                    return Some(());
                }
            }
        }
    }

    /// `[[section]]` entries to the end of the text.
    fn run(&mut self, section: &str) -> Option<Table<'t>> {
        let mut entries: Vec<Spanned<Value<'t>>> = Vec::new();
        let mut name: Option<Key<'t>> = None;
        self.skip_blank_lines()?;
        while !self.at_end() {
            let start = self.pos;
            if !self.eat("[[") {
                return None;
            }
            let name_start = self.pos;
            if !self.eat(section) {
                return None;
            }
            let name_span = name_start..self.pos;
            if !self.eat("]]") {
                return None;
            }
            let header = start..self.pos;
            self.end_of_line()?;
            if name.is_none() {
                name = Some(Spanned::new(
                    name_span.clone(),
                    Cow::Borrowed(self.slice(name_span)?),
                ));
            }
            let table = self.key_value_lines()?;
            entries.push(Spanned::new(header, Value::Table(table)));
        }
        let name = name?;
        let array_span = entries.first()?.span();
        Some(Table {
            entries: vec![(name, Spanned::new(array_span, Value::Array(entries)))],
        })
    }

    /// `key = value` lines up to the next header (a line starting with `[`) or the end.
    fn key_value_lines(&mut self) -> Option<Table<'t>> {
        let mut table = Table {
            entries: Vec::with_capacity(8),
        };
        loop {
            self.skip_blank_lines()?;
            self.skip_spaces();
            match self.peek() {
                None => return Some(table),
                // A header: only at the start of its line, where the file was cut.
                Some(b'[') => {
                    let line_start =
                        self.pos == 0 || self.text.as_bytes().get(self.pos - 1) == Some(&b'\n');
                    return line_start.then_some(table);
                }
                Some(_) => {}
            }
            let (key, value) = self.key_value()?;
            self.end_of_line()?;
            insert(&mut table, key, value)?;
        }
    }

    fn key_value(&mut self) -> Option<(Key<'t>, Spanned<Value<'t>>)> {
        let key = self.key()?;
        self.skip_spaces();
        if !self.eat("=") {
            return None;
        }
        self.skip_spaces();
        let value = self.value()?;
        Some((key, value))
    }

    /// A bare key or a quoted key without escapes (its span includes the quotes).
    fn key(&mut self) -> Option<Key<'t>> {
        let start = self.pos;
        if self.peek() == Some(b'"') {
            let inner = self.basic_string_body()?;
            return Some(Spanned::new(start..self.pos, Cow::Borrowed(inner)));
        }
        while self.peek().is_some_and(bare_key_byte) {
            self.pos += 1;
        }
        if self.pos == start {
            return None;
        }
        let key = self.slice(start..self.pos)?;
        Some(Spanned::new(start..self.pos, Cow::Borrowed(key)))
    }

    /// A `"..."` string with no escape, on the opening quote; returns the text between the quotes.
    fn basic_string_body(&mut self) -> Option<&'t str> {
        if self.text.get(self.pos..)?.starts_with("\"\"") {
            // An empty string or the start of a multi-line one: left to the full parser.
            return None;
        }
        self.pos += 1;
        let start = self.pos;
        loop {
            match self.peek()? {
                b'"' => break,
                b'\\' => return None,
                byte if !printable(byte) => return None,
                _ => self.pos += 1,
            }
        }
        let inner = self.slice(start..self.pos)?;
        self.pos += 1;
        Some(inner)
    }

    fn value(&mut self) -> Option<Spanned<Value<'t>>> {
        let start = self.pos;
        let value = match self.peek()? {
            b'"' => Value::String(Cow::Borrowed(self.basic_string_body()?)),
            b't' if self.eat("true") => Value::Boolean(true),
            b'f' if self.eat("false") => Value::Boolean(false),
            b'[' => self.array()?,
            b'{' => self.inline_table()?,
            b'-' | b'0'..=b'9' => self.number()?,
            _ => return None,
        };
        // A value ends at a delimiter; anything else (`truex`, `1979-05-27`) is not plain.
        match self.peek() {
            None | Some(b' ' | b'\t' | b'\n' | b'\r' | b',' | b']' | b'}' | b'#') => {
                Some(Spanned::new(start..self.pos, value))
            }
            Some(_) => None,
        }
    }

    /// A decimal integer of at most 18 digits (always in range) or a decimal float without exponent.
    fn number(&mut self) -> Option<Value<'t>> {
        let start = self.pos;
        if self.peek() == Some(b'-') {
            self.pos += 1;
        }
        let digits_start = self.pos;
        while self.peek().is_some_and(|byte| byte.is_ascii_digit()) {
            self.pos += 1;
        }
        let digits = self.pos - digits_start;
        let leading_zero = digits > 1 && self.text.as_bytes().get(digits_start) == Some(&b'0');
        if digits == 0 || leading_zero {
            return None;
        }
        if self.peek() == Some(b'.') {
            self.pos += 1;
            let fraction_start = self.pos;
            while self.peek().is_some_and(|byte| byte.is_ascii_digit()) {
                self.pos += 1;
            }
            if self.pos == fraction_start || self.pos - start > 300 {
                return None;
            }
            let written = self.slice(start..self.pos)?;
            return Some(Value::Float(Some(written.parse::<f64>().ok()?)));
        }
        if digits > 18 {
            return None;
        }
        let written = self.slice(start..self.pos)?;
        Some(Value::Integer(Some(written.parse::<i64>().ok()?)))
    }

    /// Spaces, tabs and line breaks between array elements (a comment there is left to the full
    /// parser).
    fn skip_array_space(&mut self) -> Option<()> {
        loop {
            match self.peek() {
                Some(b' ' | b'\t' | b'\n') => self.pos += 1,
                Some(b'\r') if self.eat("\r\n") => {}
                Some(b'\r' | b'#') => return None,
                _ => return Some(()),
            }
        }
    }

    fn array(&mut self) -> Option<Value<'t>> {
        self.pos += 1;
        let mut elements = Vec::new();
        loop {
            self.skip_array_space()?;
            if self.eat("]") {
                return Some(Value::Array(elements));
            }
            elements.push(self.value()?);
            self.skip_array_space()?;
            if self.eat("]") {
                return Some(Value::Array(elements));
            }
            if !self.eat(",") {
                return None;
            }
        }
    }

    /// A one-line inline table without a trailing comma (newlines and trailing commas are TOML 1.1
    /// only: left to the full parser).
    fn inline_table(&mut self) -> Option<Value<'t>> {
        self.pos += 1;
        let mut table = Table::default();
        self.skip_spaces();
        if self.eat("}") {
            return Some(Value::Table(table));
        }
        loop {
            self.skip_spaces();
            let (key, value) = self.key_value()?;
            insert(&mut table, key, value)?;
            self.skip_spaces();
            if self.eat("}") {
                return Some(Value::Table(table));
            }
            if !self.eat(",") {
                return None;
            }
        }
    }
}

/// Adds an entry; `None` for a key already there (a TOML error the full parser words).
fn insert<'t>(table: &mut Table<'t>, key: Key<'t>, value: Spanned<Value<'t>>) -> Option<()> {
    if table.contains_key(key.get_ref()) {
        return None;
    }
    table.entries.push((key, value));
    Some(())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The plain reading of a piece, and the `toml` crate's, in one printable form (spans included).
    fn both(text: &str, section: Option<&str>) -> (Option<String>, String) {
        let plain = read_plain(text, section).map(|table| format!("{table:?}"));
        let parsed = DeTable::parse(text).expect("valid TOML");
        (
            plain,
            format!("{:?}", Table::from_toml(parsed.into_inner())),
        )
    }

    #[test]
    fn plain_reading_equals_the_toml_crate_on_every_value_kind() {
        let root = "title = \"Té st\" # note\nunits = \"us\"\r\n\n  hazen_williams_constant = 10.67\n\
                    n = -42\nflag = true\nlist = [1, 2.5,\n  \"a\", ]\nempty = []\n\
                    \"quoted key\" = { \"T-1\" = 600.0, b = false }\nnone = {}\n";
        let (plain, parsed) = both(root, None);
        assert_eq!(plain.as_deref(), Some(parsed.as_str()));

        let run = "[[pipe]]\nid = \"P1\"\nfrom = \"J1\"\nto = \"J2\"\nlength = 100\n\n# between\n\
                   [[pipe]] # trailing\nid = \"P2\"\nc = 120.0\ncurve = [[0.0, 10.0], [5.0, 8.0]]\n";
        let (plain, parsed) = both(run, Some("pipe"));
        assert_eq!(plain.as_deref(), Some(parsed.as_str()));
    }

    #[test]
    fn anything_outside_the_plain_subset_is_left_to_the_toml_crate() {
        for text in [
            "a = \"esc\\\"aped\"\n",
            "a = 'literal'\n",
            "a = \"\"\"multi\"\"\"\n",
            "a = \"\"\n",
            "a = 1e5\n",
            "a = 1_000\n",
            "a = 012\n",
            "a = +1\n",
            "a = inf\n",
            "a = 1979-05-27\n",
            "a = 1234567890123456789\n",
            "a.b = 1\n",
            "a = 1\na = 2\n",
            "a = { b = 1, }\n",
            "a = [1, # comment\n 2]\n",
            "a = 1 b = 2\n",
            "[table]\na = 1\n",
        ] {
            assert!(read_plain(text, None).is_none(), "{text:?} read as plain");
        }
        assert!(read_plain("[[pipe]]\nid = \"P1\"\n[[junction]]\n", Some("pipe")).is_none());
        assert!(read_plain("[[pipe]]\n  [[pipe]]\n", Some("pipe")).is_none());
    }

    #[test]
    fn plain_reading_equals_the_toml_crate_on_the_demo_and_a_generated_city() {
        let demo = include_str!("../../../demo-network/district.toml");
        let mut city = crate::network::synthetic::looped_city(400, 3);
        crate::city::banded_groups(&mut city, 3);
        let city = crate::network::write::network_toml(&city);
        for text in [demo.to_string(), city] {
            let cuts: Vec<usize> = text
                .match_indices("\n[[")
                .map(|(at, _)| at + 1)
                .chain([text.len()])
                .collect();
            let root_end = cuts.first().copied().unwrap_or(text.len());
            let (plain, parsed) = both(&text[..root_end], None);
            assert_eq!(plain.as_deref(), Some(parsed.as_str()));
            for pair in cuts.windows(2) {
                let piece = &text[pair[0]..pair[1]];
                let section = piece[2..].split("]]").next().unwrap_or("");
                let (plain, parsed) = both(piece, Some(section));
                assert_eq!(plain.as_deref(), Some(parsed.as_str()), "{piece}");
            }
        }
    }
}
