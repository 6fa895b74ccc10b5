//! The network file: our own TOML schema (see `docs/network-file.md`), read into a [`Network`] with
//! every defect reported at its line and column.
//!
//! The loader walks the parsed document itself rather than deserializing it, so that one pass collects
//! every problem (unknown keys, wrong types, bad values, dangling references, isolated junctions)
//! instead of stopping at the first. It does no I/O: [`parse_network`] takes the text and a display
//! name; [`load_network_file`] is the thin helper that reads a file first.
//!
//! The text is read with the `toml` crate's borrowing, spanned parser ([`DeTable`]). A city-sized
//! file is not parsed as one document: the parser keeps every token and event of the text it is given
//! (tens of bytes for every few bytes of text), so a 28 MB file would cost well over 1 GB. The file is
//! cut before each line that starts a `[[section]]`; the top level is parsed alone and the entries in
//! runs of at most [`RUN_BYTES`], each walked and dropped before the next is parsed. TOML defines that
//! as the same document whenever every piece parses on its own, every `[[...]]` names a section and
//! every table below an entry is inline, which `parse_piece` checks. Any other file, and any file
//! with a TOML error, is read as one document, with `toml_edit` wording the syntax error so that every
//! message stays as it was.

// Network files are edited by hand: no indexing that could panic on what they hold.
#![cfg_attr(not(test), deny(clippy::indexing_slicing))]

mod tables;

use std::borrow::Cow;
use std::collections::HashMap;
use std::collections::hash_map::Entry;
use std::fmt;
use std::hash::{BuildHasherDefault, Hasher};
use std::ops::Range;
use std::path::Path;

use toml::Spanned;
use toml::de::{DeTable, DeValue};

use tables::{Table, Value};

use super::graph::{cut_off_by, reachable};
use super::lonlat::LonLat;
use super::model::{
    Condition, DEFAULT_GROUP_MAX_C, DEFAULT_GROUP_MIN_C, FixedHead, Junction, Network, NodeRef,
    Pipe, Pump, PumpCurve, RoughnessGroup, Valve, ValveKind,
};
use super::suggest::did_you_mean;
use super::units::{FlowUnit, UnitSystem};

type Span = Range<usize>;

/// One defect of a network file, at the place it was found.
///
/// Displays as `file:line:col: message (id / field)`, the parenthesis holding whichever of the id and
/// the field are known.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Diagnostic {
    /// Display name of the file, as given to the loader.
    pub file: String,
    /// 1-based line.
    pub line: usize,
    /// 1-based column, counted in characters.
    pub column: usize,
    /// What is wrong, and how to fix it when that is clear.
    pub message: String,
    /// Id (or name) of the junction, pipe, group, ... the defect belongs to, when known.
    pub id: Option<String>,
    /// The key the defect is about, when there is one.
    pub field: Option<String>,
}

impl fmt::Display for Diagnostic {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "{}:{}:{}: {}",
            self.file, self.line, self.column, self.message
        )?;
        match (&self.id, &self.field) {
            (Some(id), Some(field)) => write!(f, " ({id} / {field})"),
            (Some(id), None) => write!(f, " ({id})"),
            (None, Some(field)) => write!(f, " ({field})"),
            (None, None) => Ok(()),
        }
    }
}

/// Why a network file could not be loaded.
#[derive(Debug, thiserror::Error)]
pub enum NetworkFileError {
    /// The file could not be read at all.
    #[error("cannot read network file {file}")]
    Unreadable {
        file: String,
        #[source]
        source: std::io::Error,
    },
    /// The file was read but has defects: every one found, in file order, one per line when displayed.
    #[error("{}", display_lines(.diagnostics))]
    Invalid { diagnostics: Vec<Diagnostic> },
}

impl NetworkFileError {
    /// The diagnostics of an invalid file (empty for an unreadable one).
    pub fn diagnostics(&self) -> &[Diagnostic] {
        match self {
            Self::Unreadable { .. } => &[],
            Self::Invalid { diagnostics } => diagnostics,
        }
    }
}

fn display_lines(diagnostics: &[Diagnostic]) -> String {
    diagnostics
        .iter()
        .map(ToString::to_string)
        .collect::<Vec<_>>()
        .join("\n")
}

/// A place in the network file (1-based line and character column).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct SourceLocation {
    pub line: usize,
    pub column: usize,
}

/// Where each element of a loaded network was declared: the `[[...]]` header of its entry, in the same
/// order as the lists of [`Network`].
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct SourceMap {
    /// Display name of the file.
    pub file: String,
    pub junctions: Vec<SourceLocation>,
    pub fixed_heads: Vec<SourceLocation>,
    pub pipes: Vec<SourceLocation>,
    pub pumps: Vec<SourceLocation>,
    pub valves: Vec<SourceLocation>,
    pub groups: Vec<SourceLocation>,
    pub conditions: Vec<SourceLocation>,
}

/// A network read from a file, with where each element came from.
#[derive(Debug, Clone, PartialEq)]
pub struct LoadedNetwork {
    pub network: Network,
    pub sources: SourceMap,
}

/// Reads and parses a network file. Unreadable files and text that is not UTF-8 are reported through
/// the same error type as defects of the content.
pub fn load_network_file(path: &Path) -> Result<LoadedNetwork, NetworkFileError> {
    let file = path.display().to_string();
    let bytes = std::fs::read(path).map_err(|source| NetworkFileError::Unreadable {
        file: file.clone(),
        source,
    })?;
    match std::str::from_utf8(&bytes) {
        Ok(text) => parse_network(text, &file),
        Err(error) => {
            let valid = error.valid_up_to();
            let prefix = bytes
                .get(..valid)
                .and_then(|b| std::str::from_utf8(b).ok())
                .unwrap_or("");
            let mut reader = Reader::new(prefix, &file);
            reader.report(
                &(valid..valid),
                format!("the file is not UTF-8 text (invalid byte at offset {valid})"),
                None,
                None,
            );
            Err(reader.into_error())
        }
    }
}

/// Parses the text of a network file. `file_name` is only used to label diagnostics.
///
/// On success every quantity of the [`Network`] is in internal SI units and every reference is an
/// index. On failure the error lists every defect found, sorted by position.
pub fn parse_network(text: &str, file_name: &str) -> Result<LoadedNetwork, NetworkFileError> {
    let mut reader = Reader::new(text, file_name);
    if let Some(layout) = Layout::of(text) {
        let root_text = text.get(..layout.root_end).unwrap_or("");
        if let Some(root) = parse_piece(root_text, None)
            && !layout.conflicts_with(&root)
        {
            let loaded = reader.build_parsing_ahead(&root, &layout);
            if !reader.abandoned {
                return reader.finish(loaded);
            }
        }
        // The runs hold something only the whole document can say (a TOML error, a number too large):
        // start again on the whole text.
        reader = Reader::new(text, file_name);
    }
    if let Err(error) = toml_edit::Document::parse(text) {
        let span = error.span().unwrap_or(0..0);
        let message = error.message().trim().replace('\n', "; ");
        reader.report(&span, format!("TOML syntax error: {message}"), None, None);
        return Err(reader.into_error());
    }
    let root = match DeTable::parse(text) {
        Ok(root) => Table::from_toml(root.into_inner()),
        Err(error) => {
            // Not expected: both parsers read TOML 1.1 the same way. Said in the same words.
            let span = error.span().unwrap_or(0..0);
            let message = error.message().trim().replace('\n', "; ");
            reader.report(&span, format!("TOML syntax error: {message}"), None, None);
            return Err(reader.into_error());
        }
    };
    let loaded = reader.build(&root, &Layout::document());
    reader.finish(loaded)
}

/// Upper bound, in bytes of text, of one run of entries parsed at once: small enough that the parser's
/// tokens and events stay a few tens of MB, large enough that a city file is a few dozen parses.
pub const RUN_BYTES: usize = 1 << 20;

/// Parses a piece of the file on its own: the top level (`section` `None`) or one run of `section`
/// entries. `None` unless it is TOML whose every number is in range (as `toml_edit` requires) and
/// whose tables below the entries are all written inline, and unless a run holds only its entries:
/// anything else (a `[table]` header, a dotted key) is left to the reading of the whole document.
fn parse_piece(text: &str, section: Option<Section>) -> Option<Table<'_>> {
    if let Some(table) = tables::read_plain(text, section.map(Section::key)) {
        return Some(table);
    }
    let table = DeTable::parse(text).ok()?;
    let plain = match section {
        None => plain_values(table.get_ref(), text),
        Some(section) => {
            let mut keys = table.get_ref().iter();
            match (keys.next(), keys.next()) {
                (Some((key, entries)), None) if key.get_ref() == section.key() => {
                    match entries.get_ref() {
                        DeValue::Array(entries) => {
                            entries.iter().all(|entry| match entry.get_ref() {
                                DeValue::Table(entry) => plain_values(entry, text),
                                _ => false,
                            })
                        }
                        _ => false,
                    }
                }
                _ => false,
            }
        }
    };
    plain.then(|| Table::from_toml(table.into_inner()))
}

fn plain_values(table: &DeTable<'_>, text: &str) -> bool {
    table.values().all(|value| plain_value(value, text))
}

/// See [`parse_piece`]. An integer of up to 18 digits and a float without an exponent of up to 300
/// characters cannot be out of range, which spares parsing nearly every number twice.
fn plain_value(value: &Spanned<DeValue<'_>>, text: &str) -> bool {
    match value.get_ref() {
        DeValue::Integer(integer) => {
            let digits = integer.as_str();
            (digits.len() <= 18 && integer.radix() == 10)
                || i64::from_str_radix(digits, integer.radix()).is_ok()
        }
        DeValue::Float(float) => {
            let written = float.as_str();
            (written.len() <= 300 && !written.contains(['e', 'E', 'i', 'n']))
                || written.parse::<f64>().is_ok_and(|number| {
                    number.is_finite()
                        || written
                            .trim_start_matches(['+', '-'])
                            .chars()
                            .all(|c| c.is_ascii_alphabetic())
                })
        }
        DeValue::Array(array) => array.iter().all(|element| plain_value(element, text)),
        DeValue::Table(table) => {
            text.get(value.span().start..)
                .is_some_and(|rest| rest.starts_with('{'))
                && plain_values(table, text)
        }
        DeValue::String(_) | DeValue::Boolean(_) | DeValue::Datetime(_) => true,
    }
}

/// How the entries of a file are reached.
struct Layout {
    /// End of the top level (the first header).
    root_end: usize,
    /// Runs of consecutive `[[section]]` entries of one kind, in file order; empty for one document.
    runs: Vec<Run>,
    /// How many entries each section has (indexed by `Section as usize`), so that the walk allocates
    /// once; zeros for one document.
    entries: [usize; 7],
}

/// A run of consecutive entries of one section: the byte range of their text, headers included.
struct Run {
    section: Section,
    text: Span,
}

/// Where the entries of one section are, one parse at a time.
#[derive(Clone)]
enum Batch {
    /// The top-level table (an inline array `pipe = [{ ... }]`, or every entry of a whole document).
    Root,
    /// One run (its index in [`Layout::runs`]), parsed when it is reached.
    Run(usize, Section, Span),
}

impl Layout {
    fn document() -> Self {
        Self {
            root_end: 0,
            runs: Vec::new(),
            entries: [0; 7],
        }
    }

    /// The runs of `text`, cut before every line that starts with `[[` and names a section of this
    /// schema; `None` when such a line names anything else. A cut that falls inside a multi-line
    /// string or array leaves the piece before it unterminated, which its own parse then refuses, so
    /// a wrong cut only costs the reading of the whole document.
    fn of(text: &str) -> Option<Self> {
        let mut headers: Vec<(usize, Section)> = Vec::new();
        let mut line_start = 0;
        for line in text.split_inclusive('\n') {
            if let Some(rest) = line.strip_prefix("[[") {
                let name = rest
                    .split("]]")
                    .next()
                    .unwrap_or("")
                    .trim_matches([' ', '\t']);
                headers.push((line_start, Section::from_key(name)?));
            }
            line_start += line.len();
        }
        let root_end = headers.first().map_or(text.len(), |&(start, _)| start);
        let mut runs: Vec<Run> = Vec::new();
        let mut entries = [0; 7];
        for (index, &(start, section)) in headers.iter().enumerate() {
            if let Some(count) = entries.get_mut(section as usize) {
                *count += 1;
            }
            let end = headers.get(index + 1).map_or(text.len(), |&(next, _)| next);
            match runs.last_mut() {
                Some(run) if run.section == section && end - run.text.start <= RUN_BYTES => {
                    run.text.end = end;
                }
                _ => runs.push(Run {
                    section,
                    text: start..end,
                }),
            }
        }
        Some(Self {
            root_end,
            runs,
            entries,
        })
    }

    /// Whether the top level also holds a key that names a section with `[[...]]` entries (a
    /// duplicate key only the whole document reports).
    fn conflicts_with(&self, root: &Table<'_>) -> bool {
        self.runs
            .iter()
            .any(|run| root.contains_key(run.section.key()))
    }

    /// How many `[[section]]` entries the file has (zero when read as one document).
    fn entries_of(&self, section: Section) -> usize {
        self.entries.get(section as usize).copied().unwrap_or(0)
    }

    /// The places that hold entries of `section`, in file order.
    fn batches(&self, section: Section) -> Vec<Batch> {
        std::iter::once(Batch::Root)
            .chain(
                self.runs
                    .iter()
                    .enumerate()
                    .filter(|(_, run)| run.section == section)
                    .map(|(index, run)| Batch::Run(index, section, run.text.clone())),
            )
            .collect()
    }

    /// Every run in the order the walk opens them: section by section as [`Reader::build`] reads
    /// them, each section's runs in file order.
    fn walk_order(&self) -> Vec<(usize, Section, Span)> {
        Section::WALK_ORDER
            .into_iter()
            .flat_map(|section| {
                self.batches(section)
                    .into_iter()
                    .filter_map(|batch| match batch {
                        Batch::Run(index, section, span) => Some((index, section, span)),
                        Batch::Root => None,
                    })
            })
            .collect()
    }
}

/// The kinds of `[[...]]` entries of the file.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Section {
    Junction,
    FixedHead,
    Pipe,
    Pump,
    Valve,
    Group,
    Condition,
}

const ROOT_KEYS: &[&str] = &[
    "title",
    "units",
    "hazen_williams_constant",
    "flow_unit",
    "origin_lon",
    "origin_lat",
    "junction",
    "fixed_head",
    "pipe",
    "pump",
    "valve",
    "group",
    "condition",
];

impl Section {
    /// Every section, in the order [`Reader::build`] reads them (nodes before the links that name
    /// them, groups before the pipes).
    const WALK_ORDER: [Self; 7] = [
        Self::Junction,
        Self::FixedHead,
        Self::Group,
        Self::Pipe,
        Self::Pump,
        Self::Valve,
        Self::Condition,
    ];

    fn from_key(key: &str) -> Option<Self> {
        Self::WALK_ORDER
            .into_iter()
            .find(|section| section.key() == key)
    }

    fn key(self) -> &'static str {
        match self {
            Self::Junction => "junction",
            Self::FixedHead => "fixed_head",
            Self::Pipe => "pipe",
            Self::Pump => "pump",
            Self::Valve => "valve",
            Self::Group => "group",
            Self::Condition => "condition",
        }
    }

    /// How messages name one entry.
    fn label(self) -> &'static str {
        match self {
            Self::FixedHead => "fixed head",
            other => other.key(),
        }
    }

    fn allowed_keys(self) -> &'static [&'static str] {
        match self {
            Self::Junction => &["id", "elevation", "demand", "x", "y"],
            Self::FixedHead => &["id", "head", "x", "y"],
            Self::Pipe => &[
                "id",
                "from",
                "to",
                "length",
                "diameter",
                "c",
                "group",
                "closed",
                "check_valve",
                "minor_loss",
            ],
            Self::Pump => &["id", "from", "to", "curve", "off"],
            Self::Valve => &[
                "id",
                "from",
                "to",
                "diameter",
                "kind",
                "setting",
                "minor_loss",
                "closed",
            ],
            Self::Group => &["name", "min", "max", "locked"],
            Self::Condition => &[
                "name",
                "demand_factor",
                "heads",
                "closed",
                "pumps_off",
                "valve_settings",
            ],
        }
    }

    /// The header of one entry, as messages write it.
    fn header(self) -> &'static str {
        match self {
            Self::Junction => "[[junction]]",
            Self::FixedHead => "[[fixed_head]]",
            Self::Pipe => "[[pipe]]",
            Self::Pump => "[[pump]]",
            Self::Valve => "[[valve]]",
            Self::Group => "[[group]]",
            Self::Condition => "[[condition]]",
        }
    }

    fn id_key(self) -> &'static str {
        match self {
            Self::Group | Self::Condition => "name",
            _ => "id",
        }
    }
}

/// One table of the file being read: the root, or one `[[...]]` entry.
struct Record<'d, 't> {
    /// How messages name the entry ("pipe"); empty for the root.
    label: &'static str,
    /// `[[pipe]]` or "the top level", for unknown-key messages.
    place: &'static str,
    allowed: &'static [&'static str],
    table: &'d Table<'t>,
    /// Where the text the table was parsed from starts in the file (its spans count from there).
    offset: usize,
    /// Whether the table is written inline (`{ ... }`), and so every table in it too.
    inline: bool,
    /// The header (or inline table) of the entry: where missing keys are reported.
    header: Span,
    /// The entry's id once read, to label later messages.
    id: Option<Id<'t>>,
}

impl Record<'_, '_> {
    /// The place of a parsed piece of this table in the file.
    fn span<T>(&self, spanned: &Spanned<T>) -> Span {
        let span = spanned.span();
        span.start + self.offset..span.end + self.offset
    }
}

/// A value of a table with where it and its key are.
struct Found<'d, 't> {
    value: &'d Value<'t>,
    /// The value's span (for an array of tables, from its first header to its last).
    span: Span,
    /// What the value is, in the words of messages ("float", "inline table", "array of tables").
    kind: &'static str,
}

/// Result of reading one key.
enum Got<T> {
    /// The key is not there (and was optional).
    Absent,
    /// The key is there but wrong, or required and missing: already reported.
    Invalid,
    Value(T, Span),
}

impl<T> Got<T> {
    fn value(self) -> Option<T> {
        match self {
            Self::Value(value, _) => Some(value),
            _ => None,
        }
    }
}

/// What a link id refers to.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum LinkRef {
    Pipe(usize),
    Pump(usize),
    Valve(usize),
}

/// An id already seen in a namespace: what it was and on which line.
struct Seen<T> {
    target: T,
    what: &'static str,
    line: usize,
}

/// A fast hash for ids (the multiply-rotate hash of the Rust compiler, "FxHash"): a city file looks up
/// half a million ids, and the default hash, built to resist crafted keys from a network, is several
/// times slower on short keys. The ids come from the user's own file.
#[derive(Default)]
struct IdHasher(u64);

impl IdHasher {
    const SEED: u64 = 0x51_7c_c1_b7_27_22_0a_95;

    fn add(&mut self, word: u64) {
        self.0 = (self.0.rotate_left(5) ^ word).wrapping_mul(Self::SEED);
    }
}

impl Hasher for IdHasher {
    fn write(&mut self, bytes: &[u8]) {
        let mut chunks = bytes.chunks_exact(8);
        for chunk in &mut chunks {
            let mut word = [0u8; 8];
            word.copy_from_slice(chunk);
            self.add(u64::from_le_bytes(word));
        }
        let mut word = [0u8; 8];
        let rest = chunks.remainder();
        if let Some(target) = word.get_mut(..rest.len()) {
            target.copy_from_slice(rest);
        }
        self.add(u64::from_le_bytes(word));
    }

    fn write_u8(&mut self, byte: u8) {
        self.add(u64::from(byte));
    }

    fn finish(&self) -> u64 {
        // The low bits of a product depend only on the low bits of its factors, that is on the first
        // bytes of the id ("J4..." for ten thousand junctions), and the table picks buckets by the
        // low bits: bring the well-mixed middle of the product down (as `rustc-hash` 2 does).
        self.0.rotate_left(26)
    }
}

/// An id as the file writes it: borrowed from the text unless written with escapes.
type Id<'t> = Cow<'t, str>;

/// The ids of one namespace (node ids, link ids, group names or condition names).
struct Namespace<'t, T> {
    name: &'static str,
    seen: HashMap<Id<'t>, Seen<T>, BuildHasherDefault<IdHasher>>,
    /// Ids in file order, for suggestions.
    order: Vec<Id<'t>>,
}

impl<'t, T: Copy> Namespace<'t, T> {
    fn new(name: &'static str) -> Self {
        Self {
            name,
            seen: HashMap::default(),
            order: Vec::new(),
        }
    }

    /// A namespace of ids gathered from several kinds of entries, registered in file order so that a
    /// duplicate is reported where it appears second.
    fn in_file_order(
        reader: &mut Reader<'_>,
        name: &'static str,
        mut pending: Vec<((Id<'t>, Span), T, &'static str)>,
    ) -> Self {
        pending.sort_by_key(|((_, span), _, _)| span.start);
        let mut namespace = Self::new(name);
        namespace.seen.reserve(pending.len());
        namespace.order.reserve(pending.len());
        for (id, target, what) in &pending {
            namespace.register(reader, what, id, *target, "id");
        }
        namespace
    }

    fn get(&self, id: &str) -> Option<&Seen<T>> {
        self.seen.get(id)
    }

    fn ids(&self) -> impl Iterator<Item = &str> {
        self.order.iter().map(|id| id.as_ref())
    }

    /// Records an id, reporting a duplicate at its second appearance.
    fn register(
        &mut self,
        reader: &mut Reader<'_>,
        what: &'static str,
        (id, span): &(Id<'t>, Span),
        target: T,
        field: &str,
    ) {
        let line = reader.location(span.start).line;
        match self.seen.entry(id.clone()) {
            Entry::Occupied(first) => {
                let first = first.get();
                let message = format!(
                    "duplicate {} `{id}`: already used by the {} on line {}",
                    self.name, first.what, first.line
                );
                reader.report(span, message, Some(id), Some(field));
            }
            Entry::Vacant(slot) => {
                slot.insert(Seen { target, what, line });
                self.order.push(id.clone());
            }
        }
    }
}

struct Reader<'t> {
    text: &'t str,
    file: String,
    line_starts: Vec<usize>,
    /// The line of the last [`Self::location`], where the next one usually is.
    last_line: std::cell::Cell<usize>,
    diagnostics: Vec<Diagnostic>,
    /// A run of entries turned out not to be TOML on its own: the file must be read as one document.
    abandoned: bool,
    /// Runs parsed on a second thread while this one walks the previous runs, in walk order.
    ahead: Option<std::sync::mpsc::Receiver<ParsedRun<'t>>>,
}

/// A run parsed ahead of the walk: its index in [`Layout::runs`] and its table (`None` when it is not
/// plain TOML on its own).
type ParsedRun<'t> = (usize, Option<Table<'t>>);

impl<'t> Reader<'t> {
    fn new(text: &'t str, file: &str) -> Self {
        let line_starts = std::iter::once(0)
            .chain(
                text.bytes()
                    .enumerate()
                    .filter(|&(_, byte)| byte == b'\n')
                    .map(|(i, _)| i + 1),
            )
            .collect();
        Self {
            text,
            file: file.to_string(),
            line_starts,
            last_line: std::cell::Cell::new(0),
            diagnostics: Vec::new(),
            abandoned: false,
            ahead: None,
        }
    }

    /// [`Self::build`] with the runs parsed on a second thread, one or two runs ahead of the walk, so
    /// that parsing and walking share the two cores of a field laptop. Falls back to parsing on this
    /// thread when no thread can be started.
    fn build_parsing_ahead(&mut self, root: &Table<'t>, layout: &Layout) -> LoadedNetwork {
        let text: &'t str = self.text;
        std::thread::scope(|scope| {
            let (sender, receiver) = std::sync::mpsc::sync_channel::<ParsedRun<'t>>(2);
            let order = layout.walk_order();
            let parser = std::thread::Builder::new()
                .name("network-parse".to_string())
                .spawn_scoped(scope, move || {
                    for (index, section, span) in order {
                        let parsed = text
                            .get(span)
                            .and_then(|piece| parse_piece(piece, Some(section)));
                        let failed = parsed.is_none();
                        // A closed channel means the walk stopped: nothing more is wanted.
                        if sender.send((index, parsed)).is_err() || failed {
                            break;
                        }
                    }
                });
            if parser.is_ok() {
                self.ahead = Some(receiver);
            }
            let loaded = self.build(root, layout);
            // Closing the channel releases a parser still waiting to hand over a run.
            self.ahead = None;
            loaded
        })
    }

    fn finish(self, loaded: LoadedNetwork) -> Result<LoadedNetwork, NetworkFileError> {
        if self.diagnostics.is_empty() {
            Ok(loaded)
        } else {
            Err(self.into_error())
        }
    }

    /// The table that holds the entries of one batch, and where its text starts; `None` (and the
    /// reading abandoned) for a run that does not parse on its own.
    fn open<'a>(
        &mut self,
        root: &'a Table<'t>,
        batch: &Batch,
    ) -> Option<(std::borrow::Cow<'a, Table<'t>>, usize)> {
        if self.abandoned {
            return None;
        }
        match batch {
            Batch::Root => Some((std::borrow::Cow::Borrowed(root), 0)),
            Batch::Run(index, section, span) => {
                let text: &'t str = self.text;
                let parsed = match &self.ahead {
                    Some(ahead) => match ahead.recv() {
                        Ok((parsed_index, parsed)) if parsed_index == *index => parsed,
                        _ => None,
                    },
                    None => text
                        .get(span.clone())
                        .and_then(|piece| parse_piece(piece, Some(*section))),
                };
                match parsed {
                    Some(table) => Some((std::borrow::Cow::Owned(table), span.start)),
                    None => {
                        self.abandoned = true;
                        None
                    }
                }
            }
        }
    }

    fn into_error(mut self) -> NetworkFileError {
        self.diagnostics
            .sort_by_key(|diagnostic| (diagnostic.line, diagnostic.column));
        NetworkFileError::Invalid {
            diagnostics: self.diagnostics,
        }
    }

    /// 1-based line and character column of a byte offset.
    fn location(&self, offset: usize) -> SourceLocation {
        let offset = offset.min(self.text.len());
        // The walk asks in file order, a few lines on from the last answer: look there first.
        const NEARBY_LINES: usize = 64;
        let last = self.last_line.get();
        let nearby = self
            .line_starts
            .get(last..(last + NEARBY_LINES).min(self.line_starts.len()))
            .unwrap_or(&[]);
        let line_index = match nearby.partition_point(|&start| start <= offset) {
            found if found > 0 && found < nearby.len() => last + found - 1,
            _ => self
                .line_starts
                .partition_point(|&start| start <= offset)
                .saturating_sub(1),
        };
        self.last_line.set(line_index);
        let line_start = self.line_starts.get(line_index).copied().unwrap_or(0);
        let column = self
            .text
            .get(line_start..offset)
            .map_or(offset - line_start, |s| s.chars().count());
        SourceLocation {
            line: line_index + 1,
            column: column + 1,
        }
    }

    fn report(&mut self, span: &Span, message: String, id: Option<&str>, field: Option<&str>) {
        let location = self.location(span.start);
        self.diagnostics.push(Diagnostic {
            file: self.file.clone(),
            line: location.line,
            column: location.column,
            message,
            id: id.map(str::to_string),
            field: field.map(str::to_string),
        });
    }

    fn report_at(&mut self, rec: &Record<'_, '_>, span: &Span, message: String, field: &str) {
        let id = rec.id.clone();
        self.report(span, message, id.as_deref(), Some(field));
    }

    /// The source text of a span, shortened for messages.
    fn raw(&self, span: &Span) -> String {
        const MAX_CHARS: usize = 40;
        let text = self.text.get(span.clone()).unwrap_or("").trim();
        if text.chars().count() > MAX_CHARS {
            let head: String = text.chars().take(MAX_CHARS).collect();
            format!("{head}...")
        } else {
            text.to_string()
        }
    }

    // ---- reading keys ----

    /// `pipe `length`` or `` `units` `` for the root.
    fn what(rec: &Record<'_, '_>, key: &str) -> String {
        if rec.label.is_empty() {
            format!("`{key}`")
        } else {
            format!("{} `{key}`", rec.label)
        }
    }

    fn get<'d, 'x>(&self, rec: &Record<'d, 'x>, key: &str) -> Option<Found<'d, 'x>> {
        let (key_spanned, value) = rec.table.get_key_value(key)?;
        let key_span = rec.span(key_spanned);
        let span = rec.span(value);
        Some(self.found(rec, value.get_ref(), span, &key_span))
    }

    /// A value of a table, named the way `toml_edit` names it: in a table that is not inline, a
    /// table whose span holds its key is a `[header]` or dotted-key table, and an array whose span
    /// holds its key is an array of tables (its span then runs from its first header to its last).
    fn found<'d, 'x>(
        &self,
        rec: &Record<'d, 'x>,
        value: &'d Value<'x>,
        span: Span,
        key_span: &Span,
    ) -> Found<'d, 'x> {
        let holds_key = !rec.inline && span.start <= key_span.start;
        match value {
            Value::Array(array) if holds_key => {
                let end = array.last().map_or(span.end, |last| rec.span(last).end);
                Found {
                    value,
                    span: span.start..end,
                    kind: "array of tables",
                }
            }
            Value::Table(_) if holds_key => Found {
                value,
                span,
                kind: "table",
            },
            _ => Found {
                value,
                span,
                kind: value_type_name(value),
            },
        }
    }

    fn missing(&mut self, rec: &Record<'_, '_>, key: &str) {
        let message = if rec.label.is_empty() {
            format!("missing required key `{key}`")
        } else {
            format!("{} is missing required key `{key}`", rec.label)
        };
        let header = rec.header.clone();
        self.report_at(rec, &header, message, key);
    }

    fn wrong_type(
        &mut self,
        rec: &Record<'_, '_>,
        key: &str,
        found: &Found<'_, '_>,
        expected: &str,
    ) {
        let message = format!(
            "{} must be {expected}, found {} `{}`",
            Self::what(rec, key),
            found.kind,
            self.raw(&found.span)
        );
        self.report_at(rec, &found.span, message, key);
    }

    fn string(&mut self, rec: &Record<'_, '_>, key: &str, required: bool) -> Got<String> {
        match self.text_value(rec, key, required) {
            Got::Value(text, span) => Got::Value(text.to_string(), span),
            Got::Absent => Got::Absent,
            Got::Invalid => Got::Invalid,
        }
    }

    /// A required string value as the text holds it (borrowed from the text, not the table).
    fn id_value<'x>(&mut self, rec: &Record<'_, 'x>, key: &str) -> Got<Id<'x>> {
        let Some(found) = self.get(rec, key) else {
            self.missing(rec, key);
            return Got::Invalid;
        };
        match found.value {
            Value::String(text) => Got::Value(text.clone(), found.span),
            _ => {
                self.wrong_type(rec, key, &found, "a string");
                Got::Invalid
            }
        }
    }

    /// A string value, borrowed from the parsed table.
    fn text_value<'d>(&mut self, rec: &Record<'d, '_>, key: &str, required: bool) -> Got<&'d str> {
        let Some(found) = self.get(rec, key) else {
            if required {
                self.missing(rec, key);
                return Got::Invalid;
            }
            return Got::Absent;
        };
        match found.value.as_str() {
            Some(text) => Got::Value(text, found.span),
            None => {
                self.wrong_type(rec, key, &found, "a string");
                Got::Invalid
            }
        }
    }

    fn number(&mut self, rec: &Record<'_, '_>, key: &str, required: bool) -> Got<f64> {
        let Some(found) = self.get(rec, key) else {
            if required {
                self.missing(rec, key);
                return Got::Invalid;
            }
            return Got::Absent;
        };
        match found.value.as_number() {
            Some(number) => Got::Value(number, found.span),
            None => {
                self.wrong_type(rec, key, &found, "a number");
                Got::Invalid
            }
        }
    }

    fn boolean(&mut self, rec: &Record<'_, '_>, key: &str) -> Got<bool> {
        let Some(found) = self.get(rec, key) else {
            return Got::Absent;
        };
        match found.value.as_bool() {
            Some(flag) => Got::Value(flag, found.span),
            None => {
                self.wrong_type(rec, key, &found, "true or false");
                Got::Invalid
            }
        }
    }

    /// A number that must be finite (any sign).
    fn finite(&mut self, rec: &Record<'_, '_>, key: &str, required: bool) -> Got<f64> {
        match self.number(rec, key, required) {
            Got::Value(value, span) if !value.is_finite() => {
                let message = format!(
                    "{} must be a finite number, found `{}`",
                    Self::what(rec, key),
                    self.raw(&span)
                );
                self.report_at(rec, &span, message, key);
                Got::Invalid
            }
            other => other,
        }
    }

    /// A number that must be positive and finite.
    fn positive(&mut self, rec: &Record<'_, '_>, key: &str, required: bool) -> Got<f64> {
        match self.number(rec, key, required) {
            Got::Value(value, span) if !(value.is_finite() && value > 0.0) => {
                let message = format!(
                    "{} must be a positive finite number, found `{}`",
                    Self::what(rec, key),
                    self.raw(&span)
                );
                self.report_at(rec, &span, message, key);
                Got::Invalid
            }
            other => other,
        }
    }

    /// Reports every key of the table that the schema does not know, suggesting the intended one.
    fn check_keys(&mut self, rec: &Record<'_, '_>) {
        let unknown: Vec<(String, Span)> = rec
            .table
            .iter()
            .filter(|(key, _)| {
                !rec.allowed
                    .iter()
                    .any(|known| tables::same_key(known, key.get_ref()))
            })
            .map(|(key, _)| (key.get_ref().to_string(), rec.span(key)))
            .collect();
        for (key, span) in unknown {
            let hint = match did_you_mean(&key, rec.allowed.iter().copied()) {
                hint if hint.is_empty() => {
                    format!("; expected one of: {}", rec.allowed.join(", "))
                }
                hint => hint,
            };
            let message = format!("unknown key `{key}` in {}{hint}", rec.place);
            self.report_at(rec, &span, message, &key);
        }
    }

    /// Reads the id (or name) of an entry, reporting it missing or empty, and labels the record.
    fn read_id<'x>(
        &mut self,
        rec: &mut Record<'_, 'x>,
        section: Section,
    ) -> Option<(Id<'x>, Span)> {
        let key = section.id_key();
        match self.id_value(rec, key) {
            Got::Value(id, span) => {
                if id.trim().is_empty() {
                    let message = format!("{} must not be empty", Self::what(rec, key));
                    self.report_at(rec, &span, message, key);
                    None
                } else if let Some(odd) = id.chars().find(|&c| hidden_character(c)) {
                    let message = format!(
                        "{} must not hold control or text-direction characters, found U+{:04X}",
                        Self::what(rec, key),
                        u32::from(odd)
                    );
                    self.report(&span, message, None, Some(key));
                    // Still registered, so that its uses do not pile up as unknown-id diagnostics; the
                    // record's messages leave it out.
                    Some((id, span))
                } else {
                    rec.id = Some(id.clone());
                    Some((id, span))
                }
            }
            _ => None,
        }
    }

    /// The `[[section]]` entries of a parsed table (the root, or one run), each as a record. Accepts
    /// the usual array of tables and also an inline array of inline tables (`pipe = [{ ... }]`), which
    /// TOML treats as the same data.
    fn records<'d>(
        &mut self,
        table: &'d Table<'t>,
        offset: usize,
        section: Section,
    ) -> Vec<Record<'d, 't>> {
        let key = section.key();
        let mut records = Vec::new();
        let holder = Record {
            label: "",
            place: "",
            allowed: &[],
            table,
            offset,
            inline: false,
            header: 0..0,
            id: None,
        };
        let Some(found) = self.get(&holder, key) else {
            return records;
        };
        let make = |table: &'d Table<'t>, header: Span, inline: bool| Record {
            label: section.label(),
            place: section.header(),
            allowed: section.allowed_keys(),
            table,
            offset,
            inline,
            header,
            id: None,
        };
        match (found.value, found.kind) {
            (Value::Array(tables), "array of tables") => {
                for entry in tables.iter() {
                    if let Value::Table(table) = entry.get_ref() {
                        records.push(make(table, holder.span(entry), false));
                    }
                }
            }
            (Value::Array(array), _) => {
                for element in array.iter() {
                    let span = holder.span(element);
                    match element.get_ref() {
                        Value::Table(table) => records.push(make(table, span, true)),
                        other => {
                            let message = format!(
                                "each `{key}` entry must be a table, found {} `{}`",
                                value_type_name(other),
                                self.raw(&span)
                            );
                            self.report(&span, message, None, Some(key));
                        }
                    }
                }
            }
            (_, kind) => {
                let message = format!(
                    "`{key}` must be an array of tables: write `[[{key}]]` above each entry, found {kind}"
                );
                self.report(&found.span, message, None, Some(key));
            }
        }
        records
    }

    // ---- the whole file ----

    fn build(&mut self, root: &Table<'t>, layout: &Layout) -> LoadedNetwork {
        let root_rec = Record {
            label: "",
            place: "the top level",
            allowed: ROOT_KEYS,
            table: root,
            offset: 0,
            inline: false,
            header: 0..0,
            id: None,
        };
        self.check_keys(&root_rec);
        let title = self.string(&root_rec, "title", false).value();
        let units = match self.string(&root_rec, "units", true) {
            Got::Value(text, span) => match UnitSystem::parse(&text) {
                Some(units) => Some(units),
                None => {
                    let message = format!(
                        "`units` must be \"us\" or \"si\", found \"{text}\"{}",
                        did_you_mean(&text, ["us", "si"])
                    );
                    self.report(&span, message, None, Some("units"));
                    None
                }
            },
            _ => None,
        };
        // With no valid unit system the file is already rejected; read on in us to report the rest.
        let units_or_us = units.unwrap_or_default();
        let flow_unit = match self.string(&root_rec, "flow_unit", false) {
            Got::Value(text, span) => match FlowUnit::parse(&text) {
                Some(unit) => Some(unit),
                None => {
                    let keys = FlowUnit::ALL.map(FlowUnit::key);
                    let message = format!(
                        "`flow_unit` must be one of {}, found \"{text}\"{}",
                        keys.map(|k| format!("\"{k}\"")).join(", "),
                        did_you_mean(&text, keys)
                    );
                    self.report(&span, message, None, Some("flow_unit"));
                    None
                }
            },
            _ => None,
        };
        let flows = flow_unit.unwrap_or_else(|| FlowUnit::of_system(units_or_us));
        let mut network = Network {
            title: title.unwrap_or_default(),
            units: units_or_us,
            junctions: Vec::new(),
            fixed_heads: Vec::new(),
            pipes: Vec::new(),
            pumps: Vec::new(),
            groups: Vec::new(),
            valves: Vec::new(),
            hazen_williams_constant: self
                .positive(&root_rec, "hazen_williams_constant", false)
                .value(),
            flow_unit,
            conditions: Vec::new(),
            lonlat_origin: self.lonlat_origin(&root_rec),
        };
        let mut sources = SourceMap {
            file: self.file.clone(),
            ..SourceMap::default()
        };

        let junction_count = layout.entries_of(Section::Junction);
        let fixed_head_count = layout.entries_of(Section::FixedHead);
        let link_count = layout.entries_of(Section::Pipe)
            + layout.entries_of(Section::Pump)
            + layout.entries_of(Section::Valve);
        network.junctions.reserve(junction_count);
        sources.junctions.reserve(junction_count);
        network.pipes.reserve(layout.entries_of(Section::Pipe));
        sources.pipes.reserve(layout.entries_of(Section::Pipe));
        let mut pending_nodes: Vec<((Id<'t>, Span), NodeRef, &'static str)> =
            Vec::with_capacity(junction_count + fixed_head_count);
        let mut junction_spans: Vec<Span> = Vec::with_capacity(junction_count);

        for batch in layout.batches(Section::Junction) {
            let Some((table, offset)) = self.open(root, &batch) else {
                break;
            };
            for mut rec in self.records(&table, offset, Section::Junction) {
                sources.junctions.push(self.location(rec.header.start));
                let id = self.read_id(&mut rec, Section::Junction);
                self.check_keys(&rec);
                let elevation = self.finite(&rec, "elevation", true).value();
                let demand = self.finite(&rec, "demand", false).value();
                let position = self.position(&rec);
                let index = network.junctions.len();
                let id_span = id.as_ref().map_or(rec.header.clone(), |(_, s)| s.clone());
                if let Some(id) = &id {
                    pending_nodes.push((id.clone(), NodeRef::Junction(index), "junction"));
                }
                junction_spans.push(id_span);
                network.junctions.push(Junction {
                    id: id.map(|(id, _)| id.into_owned()).unwrap_or_default(),
                    elevation_m: units_or_us.length_to_m(elevation.unwrap_or(f64::NAN)),
                    demand_m3s: flows.to_m3s(demand.unwrap_or(0.0)),
                    position,
                });
            }
        }

        let mut any_fixed_head = false;
        for batch in layout.batches(Section::FixedHead) {
            let Some((table, offset)) = self.open(root, &batch) else {
                break;
            };
            for mut rec in self.records(&table, offset, Section::FixedHead) {
                any_fixed_head = true;
                sources.fixed_heads.push(self.location(rec.header.start));
                let id = self.read_id(&mut rec, Section::FixedHead);
                self.check_keys(&rec);
                let head = self.finite(&rec, "head", true).value();
                let position = self.position(&rec);
                let index = network.fixed_heads.len();
                if let Some(id) = &id {
                    pending_nodes.push((id.clone(), NodeRef::FixedHead(index), "fixed head"));
                }
                network.fixed_heads.push(FixedHead {
                    id: id.map(|(id, _)| id.into_owned()).unwrap_or_default(),
                    head_m: units_or_us.length_to_m(head.unwrap_or(f64::NAN)),
                    position,
                });
            }
        }

        let nodes = Namespace::in_file_order(self, "node id", pending_nodes);

        let mut groups: Namespace<usize> = Namespace::new("group name");
        for batch in layout.batches(Section::Group) {
            let Some((table, offset)) = self.open(root, &batch) else {
                break;
            };
            for mut rec in self.records(&table, offset, Section::Group) {
                sources.groups.push(self.location(rec.header.start));
                let name = self.read_id(&mut rec, Section::Group);
                self.check_keys(&rec);
                let group = self.group(&rec);
                if let Some(name) = &name {
                    groups.register(self, "group", name, network.groups.len(), "name");
                }
                network.groups.push(RoughnessGroup {
                    name: name.map(|(name, _)| name.into_owned()).unwrap_or_default(),
                    ..group
                });
            }
        }

        let mut pending_links: Vec<((Id<'t>, Span), LinkRef, &'static str)> =
            Vec::with_capacity(link_count);
        let mut all_links_resolved = true;
        for batch in layout.batches(Section::Pipe) {
            let Some((table, offset)) = self.open(root, &batch) else {
                break;
            };
            for mut rec in self.records(&table, offset, Section::Pipe) {
                sources.pipes.push(self.location(rec.header.start));
                let id = self.read_id(&mut rec, Section::Pipe);
                self.check_keys(&rec);
                let ends = self.ends(&rec, &nodes);
                let length = self.positive(&rec, "length", true).value();
                let diameter = self.positive(&rec, "diameter", true).value();
                let c_factor = self.positive(&rec, "c", true).value();
                let group = self.pipe_group(&rec, &groups);
                let closed = self.boolean(&rec, "closed").value().unwrap_or(false);
                let check_valve = self.boolean(&rec, "check_valve").value().unwrap_or(false);
                let minor_loss = self.not_negative(&rec, "minor_loss").unwrap_or(0.0);
                let index = network.pipes.len();
                if let Some(id) = &id {
                    pending_links.push((id.clone(), LinkRef::Pipe(index), "pipe"));
                }
                all_links_resolved &= ends.is_some();
                let (from, to) = ends.unwrap_or((NodeRef::Junction(0), NodeRef::Junction(0)));
                network.pipes.push(Pipe {
                    id: id.map(|(id, _)| id.into_owned()).unwrap_or_default(),
                    from,
                    to,
                    length_m: units_or_us.length_to_m(length.unwrap_or(f64::NAN)),
                    diameter_m: units_or_us.diameter_to_m(diameter.unwrap_or(f64::NAN)),
                    c_factor: c_factor.unwrap_or(f64::NAN),
                    group,
                    closed,
                    check_valve,
                    minor_loss,
                });
            }
        }

        for batch in layout.batches(Section::Pump) {
            let Some((table, offset)) = self.open(root, &batch) else {
                break;
            };
            for mut rec in self.records(&table, offset, Section::Pump) {
                sources.pumps.push(self.location(rec.header.start));
                let id = self.read_id(&mut rec, Section::Pump);
                self.check_keys(&rec);
                let ends = self.ends(&rec, &nodes);
                let curve = self.pump_curve(&rec, units_or_us, flows);
                let off = self.boolean(&rec, "off").value().unwrap_or(false);
                let index = network.pumps.len();
                if let Some(id) = &id {
                    pending_links.push((id.clone(), LinkRef::Pump(index), "pump"));
                }
                all_links_resolved &= ends.is_some();
                let (from, to) = ends.unwrap_or((NodeRef::Junction(0), NodeRef::Junction(0)));
                network.pumps.push(Pump {
                    id: id.map(|(id, _)| id.into_owned()).unwrap_or_default(),
                    from,
                    to,
                    curve: curve.unwrap_or(PumpCurve {
                        points: Vec::new(),
                        a: f64::NAN,
                        b: f64::NAN,
                        c: f64::NAN,
                    }),
                    off,
                });
            }
        }

        for batch in layout.batches(Section::Valve) {
            let Some((table, offset)) = self.open(root, &batch) else {
                break;
            };
            for mut rec in self.records(&table, offset, Section::Valve) {
                sources.valves.push(self.location(rec.header.start));
                let id = self.read_id(&mut rec, Section::Valve);
                self.check_keys(&rec);
                let ends = self.ends(&rec, &nodes);
                let diameter = self.positive(&rec, "diameter", true).value();
                let kind = self.valve_kind(&rec);
                let setting =
                    kind.and_then(|kind| self.valve_setting(&rec, kind, units_or_us, flows));
                if let (Some(kind), Some((from, to))) = (kind, ends) {
                    self.check_controlled_end(&rec, kind, from, to);
                }
                let minor_loss = self.not_negative(&rec, "minor_loss").unwrap_or(0.0);
                let closed = self.boolean(&rec, "closed").value().unwrap_or(false);
                let index = network.valves.len();
                if let Some(id) = &id {
                    pending_links.push((id.clone(), LinkRef::Valve(index), "valve"));
                }
                all_links_resolved &= ends.is_some();
                let (from, to) = ends.unwrap_or((NodeRef::Junction(0), NodeRef::Junction(0)));
                network.valves.push(Valve {
                    id: id.map(|(id, _)| id.into_owned()).unwrap_or_default(),
                    from,
                    to,
                    diameter_m: units_or_us.diameter_to_m(diameter.unwrap_or(f64::NAN)),
                    kind: kind.unwrap_or(ValveKind::Throttle),
                    setting: setting.unwrap_or(f64::NAN),
                    minor_loss,
                    closed,
                });
            }
        }

        let links = Namespace::in_file_order(self, "link id", pending_links);

        let mut conditions: Namespace<usize> = Namespace::new("condition name");
        let mut condition_spans: Vec<Span> = Vec::new();
        for batch in layout.batches(Section::Condition) {
            let Some((table, offset)) = self.open(root, &batch) else {
                break;
            };
            for mut rec in self.records(&table, offset, Section::Condition) {
                sources.conditions.push(self.location(rec.header.start));
                let name = self.read_id(&mut rec, Section::Condition);
                self.check_keys(&rec);
                let condition = self.condition(&rec, &network, &nodes, &links, units_or_us, flows);
                let name_span = name.as_ref().map_or(rec.header.clone(), |(_, s)| s.clone());
                if let Some(name) = &name {
                    conditions.register(self, "condition", name, network.conditions.len(), "name");
                }
                condition_spans.push(name_span);
                network.conditions.push(Condition {
                    name: name.map(|(name, _)| name.into_owned()).unwrap_or_default(),
                    ..condition
                });
            }
        }

        if self.abandoned {
            // The whole document is read again; nothing found so far is kept.
        } else if !any_fixed_head {
            self.report(
                &(0..0),
                "the network has no [[fixed_head]]: at least one reservoir, tank or boundary of known \
                 head is needed"
                    .to_string(),
                None,
                Some("fixed_head"),
            );
        } else if all_links_resolved {
            // A junction whose id is missing or a duplicate is already reported; no pipe can reach it.
            let reported: Vec<bool> = (0..network.junctions.len())
                .map(|j| {
                    let id = network
                        .junctions
                        .get(j)
                        .map_or("", |junction| junction.id.as_str());
                    nodes
                        .get(id)
                        .is_none_or(|seen| seen.target != NodeRef::Junction(j))
                })
                .collect();
            self.check_connectivity(&network, &junction_spans, &condition_spans, &reported);
        }

        LoadedNetwork { network, sources }
    }

    // ---- pieces of entries ----

    /// Optional plan coordinates: both `x` and `y`, or neither.
    fn position(&mut self, rec: &Record<'_, '_>) -> Option<(f64, f64)> {
        let x = self.finite(rec, "x", false);
        let y = self.finite(rec, "y", false);
        let (given, span, absent) = match (x, y) {
            (Got::Value(x, _), Got::Value(y, _)) => return Some((x, y)),
            (Got::Value(_, span), Got::Absent) => ("x", span, "y"),
            (Got::Absent, Got::Value(_, span)) => ("y", span, "x"),
            _ => return None,
        };
        let message = format!(
            "{} has `{given}` but no `{absent}`: give both plan coordinates or neither",
            rec.label
        );
        self.report_at(rec, &span, message, absent);
        None
    }

    /// `origin_lon` and `origin_lat` of the top level: both or neither, in range.
    fn lonlat_origin(&mut self, rec: &Record<'_, '_>) -> Option<LonLat> {
        let lon = self.finite(rec, "origin_lon", false);
        let lat = self.finite(rec, "origin_lat", false);
        let (given, span, absent) = match (lon, lat) {
            (Got::Value(lon_deg, lon_span), Got::Value(lat_deg, lat_span)) => {
                if !(-180.0..=180.0).contains(&lon_deg) {
                    let message = format!(
                        "`origin_lon` must be a longitude from -180 to 180 degrees, found `{lon_deg}`"
                    );
                    self.report(&lon_span, message, None, Some("origin_lon"));
                    return None;
                }
                if !(-90.0..=90.0).contains(&lat_deg) {
                    let message = format!(
                        "`origin_lat` must be a latitude from -90 to 90 degrees, found `{lat_deg}`"
                    );
                    self.report(&lat_span, message, None, Some("origin_lat"));
                    return None;
                }
                return Some(LonLat { lon_deg, lat_deg });
            }
            (Got::Value(_, span), Got::Absent) => ("origin_lon", span, "origin_lat"),
            (Got::Absent, Got::Value(_, span)) => ("origin_lat", span, "origin_lon"),
            _ => return None,
        };
        let message = format!("`{given}` given without `{absent}`: give both or neither");
        self.report(&span, message, None, Some(absent));
        None
    }

    /// The `from` and `to` of a pipe or pump, resolved to nodes.
    fn ends(
        &mut self,
        rec: &Record<'_, '_>,
        nodes: &Namespace<NodeRef>,
    ) -> Option<(NodeRef, NodeRef)> {
        let from = self.text_value(rec, "from", true);
        let to = self.text_value(rec, "to", true);
        let resolve = |reader: &mut Self, key: &str, got: &Got<&str>| -> Option<NodeRef> {
            let Got::Value(id, span) = got else {
                return None;
            };
            match nodes.get(id) {
                Some(seen) => Some(seen.target),
                None => {
                    let message = format!(
                        "{} names `{id}`, which is not a junction or fixed head of this file{}",
                        Self::what(rec, key),
                        did_you_mean(id, nodes.ids())
                    );
                    reader.report_at(rec, span, message, key);
                    None
                }
            }
        };
        let from_node = resolve(self, "from", &from);
        let to_node = resolve(self, "to", &to);
        if let (Got::Value(from_id, _), Got::Value(to_id, span)) = (&from, &to)
            && from_id == to_id
        {
            let message = format!(
                "{} connects `{from_id}` to itself: `from` and `to` must differ",
                rec.label
            );
            self.report_at(rec, span, message, "to");
            return None;
        }
        Some((from_node?, to_node?))
    }

    /// The optional `group` of a pipe, which must be declared in a `[[group]]`.
    fn pipe_group(&mut self, rec: &Record<'_, '_>, groups: &Namespace<usize>) -> Option<usize> {
        let Got::Value(name, span) = self.text_value(rec, "group", false) else {
            return None;
        };
        if let Some(seen) = groups.get(name) {
            return Some(seen.target);
        }
        let message = format!(
            "pipe `group` names `{name}`, which is not declared in any [[group]]{}",
            did_you_mean(name, groups.ids())
        );
        self.report_at(rec, &span, message, "group");
        None
    }

    /// Bounds and lock of a `[[group]]` (its name is filled in by the caller).
    fn group(&mut self, rec: &Record<'_, '_>) -> RoughnessGroup {
        let min = self.positive(rec, "min", false);
        let max = self.positive(rec, "max", false);
        let locked = self.boolean(rec, "locked").value().unwrap_or(false);
        let (min_c, min_span) = match min {
            Got::Value(value, span) => (Some(value), Some(span)),
            Got::Absent => (Some(DEFAULT_GROUP_MIN_C), None),
            Got::Invalid => (None, None),
        };
        let (max_c, max_span) = match max {
            Got::Value(value, span) => (Some(value), Some(span)),
            Got::Absent => (Some(DEFAULT_GROUP_MAX_C), None),
            Got::Invalid => (None, None),
        };
        if let (Some(min_c), Some(max_c)) = (min_c, max_c)
            && min_c >= max_c
        {
            let (span, field) = match (min_span, max_span) {
                (Some(span), _) => (span, "min"),
                (None, Some(span)) => (span, "max"),
                (None, None) => (rec.header.clone(), "min"),
            };
            let message = format!("group `min` ({min_c}) must be below `max` ({max_c})");
            self.report_at(rec, &span, message, field);
        }
        RoughnessGroup {
            name: String::new(),
            min_c: min_c.unwrap_or(f64::NAN),
            max_c: max_c.unwrap_or(f64::NAN),
            locked,
        }
    }

    /// The `curve` of a pump: at least three [flow, head gain] points whose head gain falls as flow
    /// rises, fitted by least squares; the fit itself must not rise over the range of the points.
    fn pump_curve(
        &mut self,
        rec: &Record<'_, '_>,
        units: UnitSystem,
        flows: FlowUnit,
    ) -> Option<PumpCurve> {
        let Some(found) = self.get(rec, "curve") else {
            self.missing(rec, "curve");
            return None;
        };
        let curve_span = found.span.clone();
        let Some(array) = inline_array(&found) else {
            self.wrong_type(rec, "curve", &found, "an array of [flow, head gain] pairs");
            return None;
        };
        let mut points: Vec<(f64, f64, Span)> = Vec::new();
        let mut all_good = true;
        for element in array.iter() {
            let span = rec.span(element);
            let pair = element.get_ref().as_array().and_then(|pair| {
                let mut values = pair.iter();
                match (values.next(), values.next(), values.next()) {
                    (Some(flow), Some(head), None) => {
                        Some((flow.get_ref().as_number()?, head.get_ref().as_number()?))
                    }
                    _ => None,
                }
            });
            let problem = match pair {
                None => Some("must be a pair [flow, head gain] of numbers"),
                Some((flow, head)) if !flow.is_finite() || !head.is_finite() => {
                    Some("must hold finite numbers")
                }
                Some((flow, _)) if flow < 0.0 => Some("must not have a negative flow"),
                Some((_, head)) if head < 0.0 => Some("must not have a negative head gain"),
                Some((flow, head)) => {
                    points.push((flow, head, span.clone()));
                    None
                }
            };
            if let Some(problem) = problem {
                let message = format!("pump `curve` point {problem}, found `{}`", self.raw(&span));
                self.report_at(rec, &span, message, "curve");
                all_good = false;
            }
        }
        if !all_good {
            return None;
        }
        if points.len() < 3 {
            let message = format!(
                "pump `curve` needs at least 3 [flow, head gain] points, found {}",
                points.len()
            );
            self.report_at(rec, &curve_span, message, "curve");
            return None;
        }
        points.sort_by(|a, b| a.0.total_cmp(&b.0));
        for pair in points.windows(2) {
            let [(q0, h0, _), (q1, h1, span)] = pair else {
                continue;
            };
            let problem = if q1 == q0 {
                format!("pump `curve` has two points at flow {q1}")
            } else if h1 >= h0 {
                format!(
                    "pump head gain must fall as flow rises: {h1} at flow {q1} is not below {h0} \
                     at flow {q0}"
                )
            } else {
                continue;
            };
            self.report_at(rec, span, problem, "curve");
            return None;
        }
        let si_points: Vec<(f64, f64)> = points
            .iter()
            .map(|(q, h, _)| (flows.to_m3s(*q), units.length_to_m(*h)))
            .collect();
        let (q_low, q_high, head_top) = match (si_points.first(), si_points.last()) {
            (Some(first), Some(last)) => (first.0, last.0, first.1),
            _ => return None,
        };
        let Some(curve) = PumpCurve::fit_least_squares(si_points) else {
            let message =
                "pump `curve` cannot be fitted by a parabola through these points".to_string();
            self.report_at(rec, &curve_span, message, "curve");
            return None;
        };
        // The slope is linear in q, so its largest value over the range is at one end. Allow for
        // round-off: a rise of less than 1e-9 of the shutoff head over the whole range is flat.
        let tolerance = 1e-9 * head_top.abs().max(1.0) / (q_high - q_low);
        let (q_worst, slope_worst) = [q_low, q_high]
            .into_iter()
            .map(|q| (q, curve.slope(q)))
            .fold((q_low, f64::NEG_INFINITY), |best, candidate| {
                if candidate.1 > best.1 {
                    candidate
                } else {
                    best
                }
            });
        if slope_worst > tolerance {
            let message = format!(
                "the least-squares curve h = a + bQ + cQ^2 through pump `curve` rises with flow near \
                 {} {}: head gain must fall as flow rises over the whole range; correct or add points",
                short_number(flows.from_m3s(q_worst)),
                flows.label()
            );
            self.report_at(rec, &curve_span, message, "curve");
            return None;
        }
        Some(curve)
    }

    /// The body of a `[[condition]]` (its name is filled in by the caller).
    fn condition(
        &mut self,
        rec: &Record<'_, '_>,
        network: &Network,
        nodes: &Namespace<NodeRef>,
        links: &Namespace<LinkRef>,
        units: UnitSystem,
        flows: FlowUnit,
    ) -> Condition {
        let demand_factor = self
            .positive(rec, "demand_factor", false)
            .value()
            .unwrap_or(1.0);
        let fixed_head_ids = || network.fixed_heads.iter().map(|f| f.id.as_str());
        let mut heads = Vec::new();
        if let Some(found) = self.get(rec, "heads") {
            match found.value {
                Value::Table(table) => {
                    for (key, key_span, value, value_span) in
                        self.entries_in_file_order(rec, &found, table)
                    {
                        let target = match nodes.get(key) {
                            Some(Seen {
                                target: NodeRef::FixedHead(index),
                                ..
                            }) => Some(*index),
                            Some(Seen {
                                target: NodeRef::Junction(_),
                                ..
                            }) => {
                                let message = format!(
                                    "condition `heads` names `{key}`, which is a junction: only \
                                     fixed heads can be given a head"
                                );
                                self.report_at(rec, &key_span, message, "heads");
                                None
                            }
                            None => {
                                let message = format!(
                                    "condition `heads` names `{key}`, which is not a fixed head of \
                                     this file{}",
                                    did_you_mean(key, fixed_head_ids())
                                );
                                self.report_at(rec, &key_span, message, "heads");
                                None
                            }
                        };
                        match value.as_number() {
                            Some(head) if head.is_finite() => {
                                if let Some(index) = target {
                                    heads.push((index, units.length_to_m(head)));
                                }
                            }
                            _ => {
                                let message = format!(
                                    "condition `heads` value for `{key}` must be a finite number, \
                                     found `{}`",
                                    self.raw(&value_span)
                                );
                                self.report_at(rec, &value_span, message, "heads");
                            }
                        }
                    }
                }
                _ => self.wrong_type(
                    rec,
                    "heads",
                    &found,
                    "a table of fixed head id = head, like { \"T-1\" = 600.0 }",
                ),
            }
        }
        let closed = self.link_list(rec, "closed", links, network, LinkKind::Pipe);
        let (closed_pipes, closed_valves) = closed
            .into_iter()
            .partition::<Vec<_>, _>(|link| matches!(link, LinkRef::Pipe(_)));
        let index = |link: &LinkRef| match *link {
            LinkRef::Pipe(i) | LinkRef::Pump(i) | LinkRef::Valve(i) => i,
        };
        let pumps_off = self.link_list(rec, "pumps_off", links, network, LinkKind::Pump);
        let valve_settings = self.valve_settings(rec, links, network, units, flows);
        Condition {
            name: String::new(),
            demand_factor,
            heads,
            closed_pipes: closed_pipes.iter().map(index).collect(),
            pumps_off: pumps_off.iter().map(index).collect(),
            valve_settings,
            closed_valves: closed_valves.iter().map(index).collect(),
        }
    }

    /// The entries of a `{ id = value }` table found in `rec`, in file order: each key, its place, the
    /// value and its place.
    fn entries_in_file_order<'d, 'x>(
        &self,
        rec: &Record<'d, 'x>,
        found: &Found<'d, 'x>,
        table: &'d Table<'x>,
    ) -> Vec<(&'d str, Span, &'d Value<'x>, Span)> {
        let within = Record {
            label: rec.label,
            place: "",
            allowed: &[],
            table,
            offset: rec.offset,
            inline: rec.inline || found.kind == "inline table",
            header: found.span.clone(),
            id: None,
        };
        table
            .iter()
            .map(|(key, value)| {
                let key_span = within.span(key);
                let value_span = self
                    .found(&within, value.get_ref(), within.span(value), &key_span)
                    .span;
                (
                    key.get_ref().as_ref(),
                    key_span,
                    value.get_ref(),
                    value_span,
                )
            })
            .collect()
    }

    /// An optional number that must be finite and not negative (a loss coefficient).
    fn not_negative(&mut self, rec: &Record<'_, '_>, key: &str) -> Option<f64> {
        match self.finite(rec, key, false) {
            Got::Value(value, _) if value >= 0.0 => Some(value),
            Got::Value(value, span) => {
                let message = format!(
                    "{} must not be negative, found `{value}`",
                    Self::what(rec, key)
                );
                self.report_at(rec, &span, message, key);
                None
            }
            _ => None,
        }
    }

    /// The `kind` of a valve: prv, psv, fcv or tcv.
    fn valve_kind(&mut self, rec: &Record<'_, '_>) -> Option<ValveKind> {
        let Got::Value(word, span) = self.string(rec, "kind", true) else {
            return None;
        };
        let kind = ValveKind::from_keyword(&word);
        if kind.is_none() {
            let message = format!(
                "valve `kind` must be \"prv\", \"psv\", \"fcv\" or \"tcv\", found \"{word}\"{}",
                did_you_mean(&word, ["prv", "psv", "fcv", "tcv"])
            );
            self.report_at(rec, &span, message, "kind");
        }
        kind
    }

    /// A valve setting in internal units: a pressure (psi or kPa) for prv and psv, a flow for fcv, a
    /// loss coefficient for tcv; required, finite and not negative.
    fn valve_setting(
        &mut self,
        rec: &Record<'_, '_>,
        kind: ValveKind,
        units: UnitSystem,
        flows: FlowUnit,
    ) -> Option<f64> {
        let value = match self.finite(rec, "setting", true) {
            Got::Value(value, _) if value >= 0.0 => value,
            Got::Value(value, span) => {
                let message = format!("valve `setting` must not be negative, found `{value}`");
                self.report_at(rec, &span, message, "setting");
                return None;
            }
            _ => return None,
        };
        Some(valve_setting_to_internal(kind, value, units, flows))
    }

    /// A pressure valve's controlled end must be a junction: a fixed head's grade is already set.
    fn check_controlled_end(
        &mut self,
        rec: &Record<'_, '_>,
        kind: ValveKind,
        from: NodeRef,
        to: NodeRef,
    ) {
        let (end, key) = match kind {
            ValveKind::PressureReducing => (to, "to"),
            ValveKind::PressureSustaining => (from, "from"),
            _ => return,
        };
        if matches!(end, NodeRef::FixedHead(_)) {
            let span = self
                .get(rec, key)
                .map_or(rec.header.clone(), |f| f.span.clone());
            let message = format!(
                "a {} valve holds the pressure at its `{key}` end, which must be a junction, not a fixed head",
                kind.keyword()
            );
            self.report_at(rec, &span, message, key);
        }
    }

    /// `valve_settings` of a condition: a table of valve id = setting, in each valve's own units.
    fn valve_settings(
        &mut self,
        rec: &Record<'_, '_>,
        links: &Namespace<LinkRef>,
        network: &Network,
        units: UnitSystem,
        flows: FlowUnit,
    ) -> Vec<(usize, f64)> {
        let mut settings = Vec::new();
        let Some(found) = self.get(rec, "valve_settings") else {
            return settings;
        };
        let Value::Table(table) = found.value else {
            self.wrong_type(
                rec,
                "valve_settings",
                &found,
                "a table of valve id = setting, like { \"PRV-3\" = 55.0 }",
            );
            return settings;
        };
        for (key, key_span, value, value_span) in self.entries_in_file_order(rec, &found, table) {
            let Some(LinkRef::Valve(index)) = links.get(key).map(|seen| seen.target) else {
                let message = format!(
                    "condition `valve_settings` names `{key}`, which is not a valve of this file{}",
                    did_you_mean(key, network.valves.iter().map(|v| v.id.as_str()))
                );
                self.report_at(rec, &key_span, message, "valve_settings");
                continue;
            };
            match value.as_number() {
                Some(setting) if setting.is_finite() && setting >= 0.0 => {
                    if let Some(valve) = network.valves.get(index) {
                        let internal = valve_setting_to_internal(valve.kind, setting, units, flows);
                        settings.push((index, internal));
                    }
                }
                _ => {
                    let message = format!(
                        "condition `valve_settings` value for `{key}` must be a finite number, not \
                         negative, found `{}`",
                        self.raw(&value_span)
                    );
                    self.report_at(rec, &value_span, message, "valve_settings");
                }
            }
        }
        settings
    }

    /// `closed` (pipe and valve ids) or `pumps_off` (pump ids) of a condition, resolved.
    fn link_list(
        &mut self,
        rec: &Record<'_, '_>,
        key: &str,
        links: &Namespace<LinkRef>,
        network: &Network,
        kind: LinkKind,
    ) -> Vec<LinkRef> {
        let mut indices = Vec::new();
        let Some(found) = self.get(rec, key) else {
            return indices;
        };
        let Some(array) = inline_array(&found) else {
            self.wrong_type(rec, key, &found, "an array of ids");
            return indices;
        };
        for element in array.iter() {
            let element_span = rec.span(element);
            let Some(id) = element.get_ref().as_str() else {
                let message = format!(
                    "condition `{key}` must list ids as strings, found {} `{}`",
                    value_type_name(element.get_ref()),
                    self.raw(&element_span)
                );
                self.report_at(rec, &element_span, message, key);
                continue;
            };
            let problem = match (links.get(id).map(|seen| seen.target), kind) {
                (Some(link @ (LinkRef::Pipe(_) | LinkRef::Valve(_))), LinkKind::Pipe)
                | (Some(link @ LinkRef::Pump(_)), LinkKind::Pump) => {
                    indices.push(link);
                    continue;
                }
                (Some(LinkRef::Valve(_)), LinkKind::Pump) => {
                    format!("`{id}` is a valve: list it in `closed`, not `pumps_off`")
                }
                (Some(LinkRef::Pump(_)), LinkKind::Pipe) => {
                    format!("`{id}` is a pump: list it in `pumps_off`, not `closed`")
                }
                (Some(LinkRef::Pipe(_)), LinkKind::Pump) => {
                    format!("`{id}` is a pipe: list it in `closed`, not `pumps_off`")
                }
                (None, LinkKind::Pipe) => format!(
                    "condition `closed` names `{id}`, which is not a pipe of this file{}",
                    did_you_mean(
                        id,
                        network
                            .pipes
                            .iter()
                            .map(|p| p.id.as_str())
                            .chain(network.valves.iter().map(|v| v.id.as_str()))
                    )
                ),
                (None, LinkKind::Pump) => format!(
                    "condition `pumps_off` names `{id}`, which is not a pump of this file{}",
                    did_you_mean(id, network.pumps.iter().map(|p| p.id.as_str()))
                ),
            };
            self.report_at(rec, &element_span, problem, key);
        }
        indices
    }

    /// Every junction must reach a fixed head through open pipes and running pumps, in the base state
    /// and in every condition (conditions only close links, so they can only cut junctions off).
    fn check_connectivity(
        &mut self,
        network: &Network,
        junction_spans: &[Span],
        condition_spans: &[Span],
        already_reported: &[bool],
    ) {
        let base = reachable(network, &[], &[], &[]);
        let isolated: Vec<usize> = (0..network.junctions.len())
            .filter(|&j| {
                !base.get(j).copied().unwrap_or(false)
                    && !already_reported.get(j).copied().unwrap_or(false)
            })
            .collect();
        if let Some(&first) = isolated.first() {
            let ids = list_ids(network, &isolated);
            let message = if isolated.len() == 1 {
                format!(
                    "junction {ids} is not connected to any fixed head through open pipes or pumps"
                )
            } else {
                format!(
                    "{} junctions are not connected to any fixed head through open pipes or pumps: {ids}",
                    isolated.len()
                )
            };
            let id = (isolated.len() == 1).then(|| ids.clone());
            let span = junction_spans.get(first).cloned().unwrap_or(0..0);
            self.report(&span, message, id.as_deref(), None);
        }
        for (condition, span) in network.conditions.iter().zip(condition_spans) {
            let cut_off = cut_off_by(network, condition, &base);
            if !cut_off.is_empty() {
                let message = format!(
                    "condition `{}` cuts junctions off from every fixed head: {}",
                    condition.name,
                    list_ids(network, &cut_off)
                );
                self.report(span, message, Some(&condition.name), Some("closed"));
            }
        }
    }
}

#[derive(Debug, Clone, Copy)]
enum LinkKind {
    Pipe,
    Pump,
}

/// A valve setting as written (psi or kPa for prv and psv, the flow unit for fcv, K for tcv) in the
/// model's internal units.
fn valve_setting_to_internal(
    kind: ValveKind,
    value: f64,
    units: UnitSystem,
    flows: FlowUnit,
) -> f64 {
    match kind {
        ValveKind::PressureReducing | ValveKind::PressureSustaining => {
            units.pressure_to_head_m(value)
        }
        ValveKind::FlowControl => flows.to_m3s(value),
        ValveKind::Throttle => value,
    }
}

/// A number with at most four decimals and no trailing zeros, for messages.
fn short_number(value: f64) -> String {
    let text = format!("{value:.4}");
    let text = text.trim_end_matches('0').trim_end_matches('.');
    if text == "-0" {
        "0".to_string()
    } else {
        text.to_string()
    }
}

fn list_ids(network: &Network, junctions: &[usize]) -> String {
    junctions
        .iter()
        .filter_map(|&j| network.junctions.get(j))
        .map(|j| j.id.as_str())
        .collect::<Vec<_>>()
        .join(", ")
}

/// A character that prints as nothing or reorders what follows it on a terminal (NUL and other
/// controls, bidi marks, embeddings, overrides and isolates): an id holding one looks like another id,
/// or scrambles the diagnostics it is printed in.
fn hidden_character(c: char) -> bool {
    c.is_control()
        || matches!(
            c,
            '\u{200e}' | '\u{200f}' | '\u{202a}'..='\u{202e}' | '\u{2066}'..='\u{2069}' | '\u{061c}'
        )
}

/// The array of a value written as an inline array `[...]` (not an array of tables).
fn inline_array<'d, 't>(found: &Found<'d, 't>) -> Option<&'d [Spanned<Value<'t>>]> {
    match found.value {
        Value::Array(array) if found.kind == "array" => Some(array),
        _ => None,
    }
}

/// How messages name a value (tables inside values are always inline).
fn value_type_name(value: &Value<'_>) -> &'static str {
    match value {
        Value::String(_) => "string",
        Value::Integer(_) => "integer",
        Value::Float(_) => "float",
        Value::Boolean(_) => "boolean",
        Value::Datetime => "date-time",
        Value::Array(_) => "array",
        Value::Table(_) => "inline table",
    }
}
