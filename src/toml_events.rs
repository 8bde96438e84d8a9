//! A TOML reader that deserializes straight from the parser's events, for large manifests.
//!
//! `toml::from_str` first builds the whole document as a tree of tables (every key with its
//! span, every table a map) and then deserializes from the tree; for a manifest of 10,000
//! packages that tree is most of the time and memory of reading it. This reader uses the same
//! lexer, parser and string decoders (`toml_parser`, the `toml` crate's own), keeps the
//! parser's events in a flat list, and hands keys and values to serde as it walks the list.
//! The text is read in pieces that end before a table header, each parsed when the walk
//! reaches it; a piece in the plain form the `toml` writer produces is split into tokens by
//! the small scanner in `plain` instead of `toml_parser`'s lexer and parser (the decoders
//! still check every value).
//!
//! It reads documents whose tables come in nesting order: every sub-table follows its parent
//! table (or array-of-tables element) before any other table, as `toml`'s writer emits them.
//! It gives up (returns `None`) on anything else: a dotted key, a table defined again or after
//! one of its sub-tables, a date-time value, a duplicate key, a syntax error, a value of the
//! wrong type. The caller then reads the text with `toml::from_str`, which handles all of TOML
//! (v1.0.0, <https://toml.io/en/v1.0.0>) and names the line of an error; a test checks that
//! both readers give the same value wherever this one answers.

use std::borrow::Cow;
use std::collections::HashSet;
use std::fmt;

use serde::de::{self, DeserializeSeed, IntoDeserializer, Visitor};
use toml_parser::decoder::{Encoding, ScalarKind};
use toml_parser::lexer::Token;
use toml_parser::parser::{EventReceiver, RecursionGuard, ValidateWhitespace};
use toml_parser::{ErrorSink, ParseError, Source, Span};

/// Nesting the reader follows before giving up (the `toml` crate's own limit).
const MAX_DEPTH: u32 = 80;

/// Texts are lexed and parsed in pieces of about this many bytes, each ending before a line
/// that opens a table, so that the parser's token list stays small (and its memory is used
/// again) however large the file.
const PIECE: usize = 64 * 1024;

/// Deserializes `text`, or `None` when this reader does not take it (see the module docs).
pub fn from_str<'a, T: de::Deserialize<'a>>(text: &'a str) -> Option<T> {
    from_str_in_pieces(text, PIECE)
}

/// [`from_str`] with pieces of at least `piece` bytes; `1` cuts before every line that
/// begins with `[`. For the tests, which check that the answer does not depend on it.
#[doc(hidden)]
pub fn from_str_in_pieces<'a, T: de::Deserialize<'a>>(text: &'a str, piece: usize) -> Option<T> {
    // Offsets are kept as `u32`; a larger text is left to the full parser.
    u32::try_from(text.len()).ok()?;
    // The pieces are parsed as the deserializer reaches them: only one piece's tokens and
    // events are held at a time, whatever the size of the text.
    let mut reader = Reader {
        source: Source::new(text),
        piece,
        next_start: 0,
        tokens: Vec::new(),
        collect: Collect {
            source: Source::new(""),
            offset: 0,
            events: Vec::new(),
            headers: Vec::new(),
            header: None,
            failed: false,
        },
        pos: 0,
        broken: false,
    };
    let value = T::deserialize(TableDe {
        reader: &mut reader,
        kind: TableKind::Root,
    })
    .ok()?;
    // The document ends where the text does: no piece left, no event left, none refused.
    (reader.peek().is_none() && !reader.broken).then_some(value)
}

/// Where the piece of `text` that begins at `start` ends: at the start of the first line
/// beginning with `[` at least `piece` bytes on, or at the end of the text.
fn piece_end(text: &str, start: usize, piece: usize) -> usize {
    let from = start.saturating_add(piece.max(1));
    if from >= text.len() {
        return text.len();
    }
    table_line(&text.as_bytes()[from..]).map_or(text.len(), |i| from + i + 1)
}

/// Where the first line break followed by `[` is in `bytes`.
fn table_line(bytes: &[u8]) -> Option<usize> {
    static FINDER: std::sync::LazyLock<memchr::memmem::Finder<'static>> =
        std::sync::LazyLock::new(|| memchr::memmem::Finder::new(b"\n["));
    FINDER.find(bytes)
}

/// Records that the parser or a decoder reported an error.
struct Failed(bool);

impl ErrorSink for Failed {
    fn report_error(&mut self, _error: ParseError) {
        self.0 = true;
    }
}

/// The events the reader walks: the parser's, less whitespace and comments, with table
/// headers decoded.
#[derive(Debug, Clone, Copy)]
enum Ev {
    /// A table header, by its index in [`Reader::headers`].
    Header(usize),
    /// A key of a key/value pair.
    Key(At, Option<Encoding>),
    /// `=`.
    KeyVal,
    /// A string, number or boolean.
    Scalar(At, Option<Encoding>),
    ArrayOpen,
    ArrayClose,
    InlineOpen,
    InlineClose,
    /// `,` in an array or inline table.
    Comma,
}

/// A span of the whole text, in half the room of a [`Span`].
#[derive(Debug, Clone, Copy)]
struct At(u32, u32);

impl At {
    fn span(self) -> Span {
        Span::new_unchecked(self.0 as usize, self.1 as usize)
    }
}

/// A table header: `[a.b]` or `[[a.b]]`.
struct Header<'a> {
    array: bool,
    path: Vec<Cow<'a, str>>,
    /// Where the header begins in the whole text (its first `[`).
    start: u32,
}

struct Collect<'a> {
    /// The piece being parsed, which begins at `offset` of the whole text.
    source: Source<'a>,
    offset: usize,
    events: Vec<Ev>,
    headers: Vec<Header<'a>>,
    /// The header being read.
    header: Option<Header<'a>>,
    failed: bool,
}

/// A key as written at `span`, unquoted and unescaped; `None` if it does not decode.
fn decode_key<'a>(
    source: Source<'a>,
    span: Span,
    encoding: Option<Encoding>,
) -> Option<Cow<'a, str>> {
    let raw = source.get(span)?;
    if let Some(plain) = plain_key(raw.as_str(), encoding) {
        return Some(Cow::Borrowed(plain));
    }
    let raw = toml_parser::Raw::new_unchecked(raw.as_str(), encoding, span);
    let mut out = Cow::Borrowed("");
    let mut failed = Failed(false);
    raw.decode_key(&mut out, &mut failed);
    (!failed.0).then_some(out)
}

/// A key that needs no decoding: a bare key (ASCII letters, digits, `_` and `-`, TOML v1.0.0
/// "Keys") or a quoted one for which [`plain_string`] answers. `None`: leave it to the decoder.
fn plain_key(raw: &str, encoding: Option<Encoding>) -> Option<&str> {
    match encoding {
        None => (!raw.is_empty()
            && raw
                .bytes()
                .all(|c| c.is_ascii_alphanumeric() || c == b'_' || c == b'-'))
        .then_some(raw),
        Some(encoding) => plain_string(raw, encoding),
    }
}

/// The text between the quotes of a single-line string that needs no decoding: no escape in
/// a basic string, and none of the characters TOML v1.0.0 admits in no string (the control
/// characters other than tab: U+0000 to U+0008, U+000A to U+001F, U+007F; "String"). `None`:
/// leave it to the decoder, which also names what is wrong.
fn plain_string(raw: &str, encoding: Encoding) -> Option<&str> {
    let (inner, escapes) = match encoding {
        Encoding::BasicString => (raw.strip_prefix('"')?.strip_suffix('"')?, true),
        Encoding::LiteralString => (raw.strip_prefix('\'')?.strip_suffix('\'')?, false),
        Encoding::MlBasicString | Encoding::MlLiteralString => return None,
    };
    let backslash = if escapes { b'\\' } else { b'\t' };
    // Without an early exit the loop is vectorized; strings here are short.
    let plain = inner.bytes().fold(true, |ok, c| {
        ok & ((c >= 0x20) & (c != 0x7f) & (c != backslash) | (c == b'\t'))
    });
    plain.then_some(inner)
}

impl<'a> Collect<'a> {
    /// `span` of the piece as a span of the whole text (which fits `u32`: checked first).
    fn at(&self, span: Span) -> At {
        At(
            (span.start() + self.offset) as u32,
            (span.end() + self.offset) as u32,
        )
    }

    fn open(&mut self, array: bool, span: Span) {
        if self.header.is_some() {
            self.failed = true;
        }
        self.header = Some(Header {
            array,
            path: Vec::new(),
            start: self.at(span).0,
        });
    }

    fn close(&mut self) {
        match self.header.take() {
            Some(h) if !h.path.is_empty() => {
                self.events.push(Ev::Header(self.headers.len()));
                self.headers.push(h);
            }
            _ => self.failed = true,
        }
    }
}

impl EventReceiver for Collect<'_> {
    fn std_table_open(&mut self, span: Span, _error: &mut dyn ErrorSink) {
        self.open(false, span);
    }
    fn std_table_close(&mut self, _span: Span, _error: &mut dyn ErrorSink) {
        self.close();
    }
    fn array_table_open(&mut self, span: Span, _error: &mut dyn ErrorSink) {
        self.open(true, span);
    }
    fn array_table_close(&mut self, _span: Span, _error: &mut dyn ErrorSink) {
        self.close();
    }
    fn inline_table_open(&mut self, _span: Span, _error: &mut dyn ErrorSink) -> bool {
        self.events.push(Ev::InlineOpen);
        true
    }
    fn inline_table_close(&mut self, _span: Span, _error: &mut dyn ErrorSink) {
        self.events.push(Ev::InlineClose);
    }
    fn array_open(&mut self, _span: Span, _error: &mut dyn ErrorSink) -> bool {
        self.events.push(Ev::ArrayOpen);
        true
    }
    fn array_close(&mut self, _span: Span, _error: &mut dyn ErrorSink) {
        self.events.push(Ev::ArrayClose);
    }
    fn simple_key(&mut self, span: Span, kind: Option<Encoding>, _error: &mut dyn ErrorSink) {
        if self.header.is_some() {
            match decode_key(self.source, span, kind) {
                Some(k) => {
                    if let Some(h) = self.header.as_mut() {
                        h.path.push(k);
                    }
                }
                None => self.failed = true,
            }
        } else {
            self.events.push(Ev::Key(self.at(span), kind));
        }
    }
    fn key_sep(&mut self, _span: Span, _error: &mut dyn ErrorSink) {
        // A dotted key outside a header: the caller's reader handles those.
        if self.header.is_none() {
            self.failed = true;
        }
    }
    fn key_val_sep(&mut self, _span: Span, _error: &mut dyn ErrorSink) {
        self.events.push(Ev::KeyVal);
    }
    fn scalar(&mut self, span: Span, kind: Option<Encoding>, _error: &mut dyn ErrorSink) {
        self.events.push(Ev::Scalar(self.at(span), kind));
    }
    fn value_sep(&mut self, _span: Span, _error: &mut dyn ErrorSink) {
        self.events.push(Ev::Comma);
    }
    fn comment(&mut self, span: Span, error: &mut dyn ErrorSink) {
        if let Some(raw) = self.source.get(span) {
            raw.decode_comment(error);
        }
    }
    fn newline(&mut self, span: Span, error: &mut dyn ErrorSink) {
        if let Some(raw) = self.source.get(span) {
            raw.decode_newline(error);
        }
    }
    fn error(&mut self, _span: Span, _error: &mut dyn ErrorSink) {
        self.failed = true;
    }
}

/// The reader gave up; the caller reads the text with the full parser.
#[derive(Debug)]
pub struct GiveUp;

impl fmt::Display for GiveUp {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("not read by the event reader")
    }
}

impl std::error::Error for GiveUp {}

impl de::Error for GiveUp {
    fn custom<T: fmt::Display>(_msg: T) -> Self {
        GiveUp
    }
}

struct Reader<'a> {
    /// The whole text: events' spans are spans of it.
    source: Source<'a>,
    /// The least size of a piece.
    piece: usize,
    /// Where the next piece to parse begins; the text's length when all are parsed.
    next_start: usize,
    /// The lexer's tokens of the piece being parsed (kept for the next one's room).
    tokens: Vec<Token>,
    /// The events of the current piece, and every header so far.
    collect: Collect<'a>,
    /// The next event's index in `collect.events`.
    pos: usize,
    /// A piece did not parse: the reader has given up.
    broken: bool,
}

impl<'a> Reader<'a> {
    /// The next event, parsing the next piece when this one's are used up; `None` at the end
    /// of the text or once a piece failed to parse.
    fn peek(&mut self) -> Option<Ev> {
        if self.pos == self.collect.events.len() && !self.parse_next_piece() {
            return None;
        }
        self.collect.events.get(self.pos).copied()
    }

    /// Replaces the events with the next piece's that has any; false when none is left or
    /// the piece does not parse (then `broken`).
    fn parse_next_piece(&mut self) -> bool {
        let text = self.source.input();
        while !self.broken && self.next_start < text.len() {
            let start = self.next_start;
            let end = piece_end(text, start, self.piece);
            self.next_start = end;
            let collect = &mut self.collect;
            collect.events.clear();
            self.pos = 0;
            collect.source = Source::new(&text[start..end]);
            collect.offset = start;
            let headers = collect.headers.len();
            if plain::scan(collect, &text[start..end]) {
                if !collect.events.is_empty() {
                    return true;
                }
                continue;
            }
            // Not in the plain form: the piece is parsed again by `toml_parser`.
            collect.events.clear();
            collect.headers.truncate(headers);
            collect.header = None;
            collect.failed = false;
            self.tokens.clear();
            self.tokens.extend(collect.source.lex());
            let mut failed = Failed(false);
            {
                let piece = collect.source;
                let mut validate = ValidateWhitespace::new(&mut *collect, piece);
                let mut guard = RecursionGuard::new(&mut validate, MAX_DEPTH);
                toml_parser::parser::parse_document(&self.tokens, &mut guard, &mut failed);
            }
            // A piece cut inside a multi-line string, array or inline table ends unterminated,
            // which is an error here: the whole text then goes to the full parser.
            if failed.0 || collect.failed || collect.header.is_some() {
                self.broken = true;
                collect.events.clear();
                return false;
            }
            if !collect.events.is_empty() {
                return true;
            }
        }
        false
    }

    /// Steps over the `,` between values of an array or an inline table.
    fn skip_comma(&mut self) {
        if matches!(self.peek(), Some(Ev::Comma)) {
            self.pos += 1;
        }
    }

    fn next(&mut self) -> Result<Ev, GiveUp> {
        let ev = self.peek().ok_or(GiveUp)?;
        self.pos += 1;
        Ok(ev)
    }

    fn header(&self, g: usize) -> &Header<'a> {
        &self.collect.headers[g]
    }

    fn key(&self, at: At, encoding: Option<Encoding>) -> Result<Cow<'a, str>, GiveUp> {
        decode_key(self.source, at.span(), encoding).ok_or(GiveUp)
    }

    /// The path of the table `(header, depth)`: the first `depth` keys of that header.
    fn path(&self, header: usize, depth: usize) -> &[Cow<'a, str>] {
        &self.header(header).path[..depth]
    }

    /// True when header `g` names a table below the table `at` (`None`: the root).
    fn is_below(&self, g: usize, at: Option<(usize, usize)>) -> bool {
        match at {
            None => true,
            Some((h, d)) => {
                let p = &self.header(g).path;
                p.len() > d && p[..d] == *self.path(h, d)
            }
        }
    }
}

/// Keys a table has given, to refuse a duplicate as TOML does.
#[derive(Default)]
struct Seen<'a> {
    few: Vec<Cow<'a, str>>,
    many: Option<HashSet<Cow<'a, str>>>,
}

impl<'a> Seen<'a> {
    /// False when `key` was seen before.
    fn insert(&mut self, key: Cow<'a, str>) -> bool {
        if let Some(set) = &mut self.many {
            return set.insert(key);
        }
        if self.few.contains(&key) {
            return false;
        }
        self.few.push(key);
        if self.few.len() > 16 {
            self.many = Some(self.few.drain(..).collect());
        }
        true
    }
}

#[derive(Clone, Copy)]
enum TableKind {
    /// The document.
    Root,
    /// The table a header opens; the header is at the reader's position.
    Header(usize),
    /// A table only named as part of a longer header's path: `(header, depth)`.
    Implicit(usize, usize),
    /// An array of tables: the elements' headers, the first at the reader's position.
    Array(usize),
}

struct TableDe<'r, 'a> {
    reader: &'r mut Reader<'a>,
    kind: TableKind,
}

impl<'de, 'r> de::Deserializer<'de> for TableDe<'r, 'de> {
    type Error = GiveUp;

    fn deserialize_any<V: Visitor<'de>>(self, visitor: V) -> Result<V::Value, GiveUp> {
        let at = match self.kind {
            TableKind::Root => None,
            TableKind::Header(h) => {
                self.reader.next()?;
                Some((h, self.reader.header(h).path.len()))
            }
            TableKind::Implicit(h, d) => Some((h, d)),
            TableKind::Array(first) => {
                let mut seq = ArrayOfTables {
                    reader: self.reader,
                    first,
                    done: false,
                };
                let value = visitor.visit_seq(&mut seq)?;
                return if seq.done { Ok(value) } else { Err(GiveUp) };
            }
        };
        let mut map = TableAccess {
            reader: self.reader,
            at,
            seen: Seen::default(),
            pending: None,
            done: false,
        };
        let value = visitor.visit_map(&mut map)?;
        if map.done {
            Ok(value)
        } else {
            Err(GiveUp)
        }
    }

    fn deserialize_option<V: Visitor<'de>>(self, visitor: V) -> Result<V::Value, GiveUp> {
        visitor.visit_some(self)
    }

    fn deserialize_newtype_struct<V: Visitor<'de>>(
        self,
        _name: &'static str,
        visitor: V,
    ) -> Result<V::Value, GiveUp> {
        visitor.visit_newtype_struct(self)
    }

    serde::forward_to_deserialize_any! {
        bool i8 i16 i32 i64 i128 u8 u16 u32 u64 u128 f32 f64 char str string
        bytes byte_buf unit unit_struct seq tuple tuple_struct map struct enum
        identifier ignored_any
    }
}

/// What the last key of a table holds.
enum Pending {
    /// A value after `=`, at the reader's position.
    Inline,
    /// A table or array of tables from headers.
    Table(TableKind),
}

struct TableAccess<'r, 'a> {
    reader: &'r mut Reader<'a>,
    /// `(header, depth)` of this table; `None` for the root.
    at: Option<(usize, usize)>,
    seen: Seen<'a>,
    pending: Option<Pending>,
    done: bool,
}

impl<'de> de::MapAccess<'de> for TableAccess<'_, 'de> {
    type Error = GiveUp;

    fn next_key_seed<K: DeserializeSeed<'de>>(
        &mut self,
        seed: K,
    ) -> Result<Option<K::Value>, GiveUp> {
        let Some(ev) = self.reader.peek() else {
            self.done = true;
            return Ok(None);
        };
        let key = match ev {
            Ev::Key(span, enc) => {
                self.reader.pos += 1;
                self.pending = Some(Pending::Inline);
                self.reader.key(span, enc)?
            }
            Ev::Header(g) if self.reader.is_below(g, self.at) => {
                let depth = self.at.map_or(0, |(_, d)| d);
                let header = self.reader.header(g);
                let key = header.path[depth].clone();
                self.pending = Some(Pending::Table(if header.path.len() > depth + 1 {
                    TableKind::Implicit(g, depth + 1)
                } else if header.array {
                    TableKind::Array(g)
                } else {
                    TableKind::Header(g)
                }));
                key
            }
            Ev::Header(_) => {
                self.done = true;
                return Ok(None);
            }
            _ => return Err(GiveUp),
        };
        if !self.seen.insert(key.clone()) {
            return Err(GiveUp);
        }
        seed.deserialize(CowKey(key)).map(Some)
    }

    fn next_value_seed<V: DeserializeSeed<'de>>(&mut self, seed: V) -> Result<V::Value, GiveUp> {
        match self.pending.take().ok_or(GiveUp)? {
            Pending::Inline => {
                if !matches!(self.reader.next()?, Ev::KeyVal) {
                    return Err(GiveUp);
                }
                seed.deserialize(ValueDe {
                    reader: &mut *self.reader,
                })
            }
            Pending::Table(kind) => seed.deserialize(TableDe {
                reader: &mut *self.reader,
                kind,
            }),
        }
    }
}

struct ArrayOfTables<'r, 'a> {
    reader: &'r mut Reader<'a>,
    first: usize,
    done: bool,
}

impl<'de> de::SeqAccess<'de> for ArrayOfTables<'_, 'de> {
    type Error = GiveUp;

    fn next_element_seed<T: DeserializeSeed<'de>>(
        &mut self,
        seed: T,
    ) -> Result<Option<T::Value>, GiveUp> {
        match self.reader.peek() {
            Some(Ev::Header(g))
                if self.reader.header(g).array
                    && self.reader.header(g).path == self.reader.header(self.first).path =>
            {
                seed.deserialize(TableDe {
                    reader: &mut *self.reader,
                    kind: TableKind::Header(g),
                })
                .map(Some)
            }
            _ => {
                self.done = true;
                Ok(None)
            }
        }
    }

    /// The number of elements, counted in the text (the headers after this piece are not
    /// parsed yet): lines written exactly as the first element's header, sub-tables of its
    /// elements between them; the count stops at any other line that opens a table. Only a
    /// hint for the room of the vector: a header written another way ends the count early.
    fn size_hint(&self) -> Option<usize> {
        let reader = &*self.reader;
        let first = reader.collect.headers.get(self.first)?;
        let text = reader.source.input();
        let line_at = |at: usize| {
            let rest = &text[at..];
            rest[..memchr::memchr(b'\n', rest.as_bytes()).unwrap_or(rest.len())].trim_end()
        };
        let header = line_at(first.start as usize);
        let inner = header.trim_start_matches('[').trim_end_matches(']');
        let mut n = 0;
        let mut at = first.start as usize;
        loop {
            let line = line_at(at);
            if line == header {
                n += 1;
            } else if !line
                .trim_start_matches('[')
                .strip_prefix(inner)
                .is_some_and(|rest| rest.starts_with('.'))
            {
                break;
            }
            match table_line(&text.as_bytes()[at..]) {
                Some(i) => at += i + 1,
                None => break,
            }
        }
        Some(n)
    }
}

/// A key, borrowed from the text unless it had escapes.
struct CowKey<'a>(Cow<'a, str>);

impl<'de> de::Deserializer<'de> for CowKey<'de> {
    type Error = GiveUp;

    fn deserialize_any<V: Visitor<'de>>(self, visitor: V) -> Result<V::Value, GiveUp> {
        match self.0 {
            Cow::Borrowed(s) => visitor.visit_borrowed_str(s),
            Cow::Owned(s) => visitor.visit_string(s),
        }
    }

    serde::forward_to_deserialize_any! {
        bool i8 i16 i32 i64 i128 u8 u16 u32 u64 u128 f32 f64 char str string
        bytes byte_buf option unit unit_struct newtype_struct seq tuple
        tuple_struct map struct enum identifier ignored_any
    }
}

/// The value after `=` or in an array, at the reader's position.
struct ValueDe<'r, 'a> {
    reader: &'r mut Reader<'a>,
}

enum Scalar<'a> {
    Str(Cow<'a, str>),
    Bool(bool),
    Int(i64),
    UInt(u64),
    Float(f64),
}

impl<'a> ValueDe<'_, 'a> {
    fn scalar(&self, at: At, encoding: Option<Encoding>) -> Result<Scalar<'a>, GiveUp> {
        let span = at.span();
        let raw = self.reader.source.get(span).ok_or(GiveUp)?;
        if let Some(plain) = encoding.and_then(|e| plain_string(raw.as_str(), e)) {
            return Ok(Scalar::Str(Cow::Borrowed(plain)));
        }
        let raw = toml_parser::Raw::new_unchecked(raw.as_str(), encoding, span);
        let mut out = Cow::Borrowed("");
        let mut failed = Failed(false);
        let kind = raw.decode_scalar(&mut out, &mut failed);
        if failed.0 {
            return Err(GiveUp);
        }
        Ok(match kind {
            ScalarKind::String => Scalar::Str(out),
            ScalarKind::Boolean(b) => Scalar::Bool(b),
            ScalarKind::Integer(radix) => match i64::from_str_radix(&out, radix.value()) {
                Ok(n) => Scalar::Int(n),
                Err(_) => {
                    Scalar::UInt(u64::from_str_radix(&out, radix.value()).map_err(|_| GiveUp)?)
                }
            },
            ScalarKind::Float => {
                let f: f64 = out.parse().map_err(|_| GiveUp)?;
                // An overflowing literal is an error in TOML, not infinity.
                if f.is_infinite() && !out.contains("inf") {
                    return Err(GiveUp);
                }
                Scalar::Float(f)
            }
            ScalarKind::DateTime => return Err(GiveUp),
        })
    }
}

impl<'de> de::Deserializer<'de> for ValueDe<'_, 'de> {
    type Error = GiveUp;

    fn deserialize_any<V: Visitor<'de>>(self, visitor: V) -> Result<V::Value, GiveUp> {
        match self.reader.next()? {
            Ev::Scalar(span, enc) => match self.scalar(span, enc)? {
                Scalar::Str(Cow::Borrowed(s)) => visitor.visit_borrowed_str(s),
                Scalar::Str(Cow::Owned(s)) => visitor.visit_string(s),
                Scalar::Bool(b) => visitor.visit_bool(b),
                Scalar::Int(n) => visitor.visit_i64(n),
                Scalar::UInt(n) => visitor.visit_u64(n),
                Scalar::Float(f) => visitor.visit_f64(f),
            },
            Ev::ArrayOpen => {
                let mut seq = ArrayAccess {
                    reader: self.reader,
                    done: false,
                };
                let value = visitor.visit_seq(&mut seq)?;
                if seq.done {
                    Ok(value)
                } else {
                    Err(GiveUp)
                }
            }
            Ev::InlineOpen => {
                let mut map = InlineAccess {
                    reader: self.reader,
                    seen: Seen::default(),
                    done: false,
                };
                let value = visitor.visit_map(&mut map)?;
                if map.done {
                    Ok(value)
                } else {
                    Err(GiveUp)
                }
            }
            _ => Err(GiveUp),
        }
    }

    fn deserialize_option<V: Visitor<'de>>(self, visitor: V) -> Result<V::Value, GiveUp> {
        visitor.visit_some(self)
    }

    fn deserialize_newtype_struct<V: Visitor<'de>>(
        self,
        _name: &'static str,
        visitor: V,
    ) -> Result<V::Value, GiveUp> {
        visitor.visit_newtype_struct(self)
    }

    fn deserialize_enum<V: Visitor<'de>>(
        self,
        _name: &'static str,
        _variants: &'static [&'static str],
        visitor: V,
    ) -> Result<V::Value, GiveUp> {
        // A unit variant written as its name; any other form goes to the full reader.
        match self.reader.next()? {
            Ev::Scalar(span, enc) => match self.scalar(span, enc)? {
                Scalar::Str(s) => visitor.visit_enum(s.into_deserializer()),
                _ => Err(GiveUp),
            },
            _ => Err(GiveUp),
        }
    }

    serde::forward_to_deserialize_any! {
        bool i8 i16 i32 i64 i128 u8 u16 u32 u64 u128 f32 f64 char str string
        bytes byte_buf unit unit_struct seq tuple tuple_struct map struct
        identifier ignored_any
    }
}

struct ArrayAccess<'r, 'a> {
    reader: &'r mut Reader<'a>,
    done: bool,
}

impl<'de> de::SeqAccess<'de> for ArrayAccess<'_, 'de> {
    type Error = GiveUp;

    fn next_element_seed<T: DeserializeSeed<'de>>(
        &mut self,
        seed: T,
    ) -> Result<Option<T::Value>, GiveUp> {
        self.reader.skip_comma();
        if matches!(self.reader.peek(), Some(Ev::ArrayClose)) {
            self.reader.pos += 1;
            self.done = true;
            return Ok(None);
        }
        seed.deserialize(ValueDe {
            reader: &mut *self.reader,
        })
        .map(Some)
    }
}

struct InlineAccess<'r, 'a> {
    reader: &'r mut Reader<'a>,
    seen: Seen<'a>,
    done: bool,
}

impl<'de> de::MapAccess<'de> for InlineAccess<'_, 'de> {
    type Error = GiveUp;

    fn next_key_seed<K: DeserializeSeed<'de>>(
        &mut self,
        seed: K,
    ) -> Result<Option<K::Value>, GiveUp> {
        self.reader.skip_comma();
        match self.reader.next()? {
            Ev::InlineClose => {
                self.done = true;
                Ok(None)
            }
            Ev::Key(span, enc) => {
                let key = self.reader.key(span, enc)?;
                if !self.seen.insert(key.clone()) {
                    return Err(GiveUp);
                }
                seed.deserialize(CowKey(key)).map(Some)
            }
            _ => Err(GiveUp),
        }
    }

    fn next_value_seed<V: DeserializeSeed<'de>>(&mut self, seed: V) -> Result<V::Value, GiveUp> {
        if !matches!(self.reader.next()?, Ev::KeyVal) {
            return Err(GiveUp);
        }
        seed.deserialize(ValueDe {
            reader: &mut *self.reader,
        })
    }
}

/// A scanner for the plain form of TOML that runprint's writer (the `toml` crate's) produces:
/// one table header or `key = value` per line, bare or single-line quoted keys, single-line
/// strings, bare scalars, arrays of those over one or more lines, spaces and tabs, `\n` or
/// `\r\n` line ends. It finds where each token begins and ends and hands them to [`Collect`] as
/// `toml_parser` would; decoding and checking the strings, keys, numbers and booleans is left
/// to `toml_parser`'s decoders, as for any piece. Anything else (a comment, a dotted key, an
/// inline table, a multi-line string, a date-time written with a space, a byte it does not
/// expect) makes it answer `false`, and the piece is lexed and parsed by `toml_parser`.
///
/// The lexer and parser of `toml_parser` take most of the time of reading a large manifest;
/// this scanner walks each byte once.
mod plain {
    use super::{Collect, Failed};
    use toml_parser::decoder::Encoding;
    use toml_parser::parser::EventReceiver;
    use toml_parser::Span;

    /// Arrays nested deeper than this are left to `toml_parser`.
    const MAX_NESTING: u32 = 16;

    /// Scans `piece` (the text `c.source` holds) into `c`'s events; false when it is not in
    /// the plain form or a header's key does not decode.
    pub(super) fn scan(c: &mut Collect<'_>, piece: &str) -> bool {
        let b = piece.as_bytes();
        let mut sink = Failed(false);
        let mut i = 0;
        loop {
            i = skip_blanks(b, i);
            match b.get(i) {
                None => break,
                Some(b'\n') => i += 1,
                Some(b'\r') if b.get(i + 1) == Some(&b'\n') => i += 2,
                Some(b'[') => {
                    let array = b.get(i + 1) == Some(&b'[');
                    let width = if array { 2 } else { 1 };
                    if array {
                        c.array_table_open(span(i, i + 2), &mut sink);
                    } else {
                        c.std_table_open(span(i, i + 1), &mut sink);
                    }
                    i += width;
                    loop {
                        i = skip_blanks(b, i);
                        let Some((end, encoding)) = key(b, i) else {
                            return false;
                        };
                        c.simple_key(span(i, end), encoding, &mut sink);
                        i = skip_blanks(b, end);
                        match b.get(i) {
                            Some(b'.') => {
                                c.key_sep(span(i, i + 1), &mut sink);
                                i += 1;
                            }
                            Some(b']') => break,
                            _ => return false,
                        }
                    }
                    if array {
                        if b.get(i + 1) != Some(&b']') {
                            return false;
                        }
                        c.array_table_close(span(i, i + 2), &mut sink);
                    } else {
                        c.std_table_close(span(i, i + 1), &mut sink);
                    }
                    i += width;
                    let Some(next) = line_end(b, i) else {
                        return false;
                    };
                    i = next;
                }
                Some(_) => {
                    let Some((end, encoding)) = key(b, i) else {
                        return false;
                    };
                    c.simple_key(span(i, end), encoding, &mut sink);
                    i = skip_blanks(b, end);
                    if b.get(i) != Some(&b'=') {
                        return false;
                    }
                    c.key_val_sep(span(i, i + 1), &mut sink);
                    i = skip_blanks(b, i + 1);
                    let Some(end) = value(c, b, i, 0, &mut sink) else {
                        return false;
                    };
                    let Some(next) = line_end(b, end) else {
                        return false;
                    };
                    i = next;
                }
            }
            if sink.0 || c.failed {
                return false;
            }
        }
        !sink.0 && !c.failed && c.header.is_none()
    }

    fn span(start: usize, end: usize) -> Span {
        Span::new_unchecked(start, end)
    }

    /// The first byte at or after `i` that is not a space or a tab.
    fn skip_blanks(b: &[u8], mut i: usize) -> usize {
        while matches!(b.get(i), Some(b' ' | b'\t')) {
            i += 1;
        }
        i
    }

    /// After a header or a value: blanks, then the end of the line (or of the piece). Where
    /// the next line begins.
    fn line_end(b: &[u8], i: usize) -> Option<usize> {
        let i = skip_blanks(b, i);
        match b.get(i) {
            None => Some(i),
            Some(b'\n') => Some(i + 1),
            Some(b'\r') if b.get(i + 1) == Some(&b'\n') => Some(i + 2),
            _ => None,
        }
    }

    /// A bare or single-line quoted key at `i`: where it ends, and its quoting.
    fn key(b: &[u8], i: usize) -> Option<(usize, Option<Encoding>)> {
        match b.get(i)? {
            b'"' | b'\'' => quoted(b, i),
            _ => {
                let end = bare_end(b, i, |c| {
                    c.is_ascii_alphanumeric() || c == b'_' || c == b'-'
                });
                (end > i).then_some((end, None))
            }
        }
    }

    /// A single-line basic (`"`) or literal (`'`) string at `i`; `None` for a multi-line one
    /// or one not closed on its line.
    fn quoted(b: &[u8], i: usize) -> Option<(usize, Option<Encoding>)> {
        let quote = b[i];
        if b.get(i + 1) == Some(&quote) && b.get(i + 2) == Some(&quote) {
            return None;
        }
        // A `\r` inside is left to the decoder, which refuses it as a control character.
        let mut j = i + 1;
        loop {
            let rest = b.get(j..)?;
            j += if quote == b'"' {
                memchr::memchr3(quote, b'\\', b'\n', rest)?
            } else {
                memchr::memchr2(quote, b'\n', rest)?
            };
            match b[j] {
                b'\n' => return None,
                b'\\' => j += 2,
                _ => break,
            }
        }
        let encoding = if quote == b'"' {
            Encoding::BasicString
        } else {
            Encoding::LiteralString
        };
        Some((j + 1, Some(encoding)))
    }

    fn bare_end(b: &[u8], mut i: usize, admits: impl Fn(u8) -> bool) -> usize {
        while b.get(i).is_some_and(|&c| admits(c)) {
            i += 1;
        }
        i
    }

    /// A value at `i`: a string, a bare scalar (number or boolean, checked when decoded) or an
    /// array of values. Where it ends.
    fn value(
        c: &mut Collect<'_>,
        b: &[u8],
        i: usize,
        depth: u32,
        sink: &mut Failed,
    ) -> Option<usize> {
        match *b.get(i)? {
            b'"' | b'\'' => {
                let (end, encoding) = quoted(b, i)?;
                c.scalar(span(i, end), encoding, sink);
                Some(end)
            }
            b'[' if depth < MAX_NESTING => {
                if !c.array_open(span(i, i + 1), sink) {
                    return None;
                }
                let mut j = i + 1;
                loop {
                    j = skip_blanks_and_lines(b, j)?;
                    if b.get(j) == Some(&b']') {
                        c.array_close(span(j, j + 1), sink);
                        return Some(j + 1);
                    }
                    j = value(c, b, j, depth + 1, sink)?;
                    j = skip_blanks_and_lines(b, j)?;
                    match b.get(j)? {
                        b',' => {
                            c.value_sep(span(j, j + 1), sink);
                            j += 1;
                        }
                        b']' => {
                            c.array_close(span(j, j + 1), sink);
                            return Some(j + 1);
                        }
                        _ => return None,
                    }
                }
            }
            _ => {
                let end = bare_end(b, i, |c| {
                    c.is_ascii_alphanumeric() || matches!(c, b'_' | b'+' | b'-' | b'.' | b':')
                });
                if end == i {
                    return None;
                }
                c.scalar(span(i, end), None, sink);
                Some(end)
            }
        }
    }

    /// Inside an array: blanks and line ends.
    fn skip_blanks_and_lines(b: &[u8], mut i: usize) -> Option<usize> {
        loop {
            i = skip_blanks(b, i);
            match b.get(i) {
                Some(b'\n') => i += 1,
                Some(b'\r') if b.get(i + 1) == Some(&b'\n') => i += 2,
                Some(b'\r') => return None,
                _ => return Some(i),
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::collections::BTreeMap;

    /// Both readers on one text: this one answers the same as `toml`, or not at all.
    fn same(text: &str) -> Option<toml::Value> {
        let full: Result<toml::Value, _> = toml::from_str(text);
        let fast: Option<toml::Value> = from_str(text);
        if let Some(v) = &fast {
            assert_eq!(Some(v), full.as_ref().ok(), "{text}");
        }
        // Cut before every table: the same answer.
        let cut: Option<toml::Value> = from_str_in_pieces(text, 1);
        if let Some(v) = &cut {
            assert_eq!(Some(v), full.as_ref().ok(), "{text}");
        }
        fast
    }

    /// Worked examples from the TOML v1.0.0 specification (<https://toml.io/en/v1.0.0>):
    /// tables, arrays of tables, inline tables, strings with escapes, literal and multi-line
    /// strings, integers in every radix, floats, booleans.
    #[test]
    fn reads_the_specification_examples_in_nesting_order() {
        let doc = r#"
# This is a TOML document
title = "TOML Example"
str = "I'm a string. \"You can quote me\". Name\tJos\u00E9\nLocation\tSF."
winpath = 'C:\Users\nodejs\templates'
lines = """
Roses are red
Violets are blue"""
int1 = +99
hex1 = 0xDEADBEEF
oct1 = 0o755
bin1 = 0b11010110
big = 5_349_221
flt1 = +1.0
flt2 = 3.1415
flt3 = -0.01
flt4 = 5e+22
sf1 = inf
bool1 = true
integers = [ 1, 2, 3 ]
nested_mixed_array = [ [ 1, 2 ], ["a", "b", "c"] ]
points = [ { x = 1, y = 2, z = 3 },
           { x = 7, y = 8, z = 9 } ]
"key with spaces" = 1
'quoted "value"' = "value"

[owner]
name = "Tom Preston-Werner"

[servers]

[servers.alpha]
ip = "10.0.0.1"
role = "frontend"

[servers.beta]
ip = "10.0.0.2"
role = "backend"

[[products]]
name = "Hammer"
sku = 738594937

[[products]]  # empty table within the array

[[products]]
name = "Nail"
sku = 284758393
color = "gray"

[[fruits]]
name = "apple"

[fruits.physical]  # subtable
color = "red"
shape = "round"

[[fruits.varieties]]  # nested array of tables
name = "red delicious"

[[fruits.varieties]]
name = "granny smith"

[[fruits]]
name = "banana"

[[fruits.varieties]]
name = "plantain"

[x.y.z.w] # implicit super-tables
a = 1
"#;
        assert!(same(doc).is_some());
    }

    /// What this reader leaves to `toml` (each valid or not, per the specification): it must
    /// answer nothing, never something else.
    /// Texts longer than a piece: a line beginning with `[` inside a multi-line string, array
    /// or inline table past the piece size must not cut the text there (the piece before would
    /// end unterminated: the reader gives up and the full parser reads it), and a long document
    /// of tables reads the same as with the `toml` crate across many pieces.
    #[test]
    fn pieces_end_only_between_tables() {
        let filler: String = (0..PIECE / 12)
            .map(|i| format!("k{i:05} = {:04}\n", i + 1000))
            .collect();
        for inside in [
            "s = \"\"\"\n[not.a.table]\nx = 1\n\"\"\"\n",
            "s = '''\n[not.a.table]\n'''\n",
            "a = [\n[1, 2],\n[3],\n]\n",
        ] {
            let doc = format!("[first]\n{filler}{inside}[after]\ny = 2\n");
            assert!(doc.len() > PIECE);
            let full: toml::Value = toml::from_str(&doc).unwrap();
            // Either reader's answer is the `toml` crate's.
            if let Some(fast) = same(&doc) {
                assert_eq!(fast, full);
            }
        }
        let many: String = (0..20_000)
            .map(|i| format!("[[p]]\nname = \"n{i}\"\nv = [\"{i}\", 'x']\n"))
            .collect();
        assert!(many.len() > 4 * PIECE);
        let fast = same(&many).expect("a plain array of tables is read");
        assert_eq!(fast["p"].as_array().unwrap().len(), 20_000);
    }

    #[test]
    fn gives_up_on_what_it_does_not_read() {
        for doc in [
            "a.b = 1\n",                       // dotted key
            "[a.b]\nx = 1\n[a]\ny = 2\n",      // super-table after its sub-table (valid)
            "[a]\nx = 1\n[b]\n[a.c]\ny = 2\n", // table continued after another (valid)
            "d = 1979-05-27T07:32:00Z\n",      // date-time
            "a = 1\na = 2\n",                  // duplicate key (invalid)
            "[a]\n[a]\n",                      // table defined twice (invalid)
            "a = \"\\q\"\n",                   // invalid escape
            "a = 99999999999999999999999\n",   // integer overflow
            "a = [1,\n",                       // syntax error
            "a = { b = 1, b = 2 }\n",          // duplicate key in an inline table
        ] {
            assert!(same(doc).is_none(), "{doc}");
        }
    }

    /// Every piece of a manifest as the `toml` crate writes it is taken by the plain scanner
    /// (so `toml_parser`'s lexer is not run), and reads as `toml` reads it.
    #[test]
    fn the_writers_output_is_in_the_plain_form() {
        let mut doc = toml::Table::new();
        doc.insert("s".into(), "tab\there \"quoted\" \\ é \u{1F600}".into());
        doc.insert("empty".into(), "".into());
        doc.insert("n".into(), toml::Value::Integer(-42));
        doc.insert("f".into(), toml::Value::Float(1.5e-7));
        doc.insert("b".into(), true.into());
        doc.insert("key with spaces".into(), "v".into());
        let short = vec![toml::Value::from("a"), "b".into()];
        doc.insert("short".into(), toml::Value::Array(short));
        let long: Vec<toml::Value> = (0..40).map(|i| format!("item-{i}").into()).collect();
        doc.insert("long".into(), toml::Value::Array(long));
        let nested = toml::Value::Array(vec![toml::Value::Array(vec![1.into(), 2.into()])]);
        doc.insert("nested".into(), nested);
        let mut table = toml::Table::new();
        table.insert("x".into(), "y".into());
        let mut sub = toml::Table::new();
        sub.insert("z".into(), 3.into());
        table.insert("sub".into(), toml::Value::Table(sub));
        doc.insert("t".into(), toml::Value::Table(table.clone()));
        let rows = vec![toml::Value::Table(table.clone()), table.into()];
        doc.insert("rows".into(), toml::Value::Array(rows));
        let text = toml::to_string(&toml::Value::Table(doc.clone())).unwrap();
        let mut collect = Collect {
            source: Source::new(&text),
            offset: 0,
            events: Vec::new(),
            headers: Vec::new(),
            header: None,
            failed: false,
        };
        assert!(plain::scan(&mut collect, &text), "{text}");
        assert_eq!(same(&text), Some(toml::Value::Table(doc)));
        let crlf = text.replace('\n', "\r\n");
        assert!(same(&crlf).is_some(), "{crlf}");
    }

    /// What the plain scanner does not take goes to `toml_parser` (the same answer as `toml`,
    /// or none); what TOML refuses is refused whichever reads it. Each case is checked alone
    /// and after a plain piece, so that both readers see it.
    #[test]
    fn the_plain_scanner_hands_over_or_refuses() {
        for doc in [
            "a = 1 # a comment\n",
            "# a comment\na = 1\n",
            "a = [\"x\", # inside\n \"y\"]\n",
            "a = { b = 1 }\n",
            "a = \"\"\"multi\nline\"\"\"\n",
            "a = '''lit'''\n",
            "a = '\\no escapes'\n",
            "\"\" = 1\n",
            "'quoted' = 'literal \"x\"'\n",
            "[ a . \"b c\" ]\nx = 1\n",
            "[[ a ]]\n[[a]]\n",
            "a = [ ]\n",
            "a = [1, 2,]\n",
            "a = [\n  [1],\n  [\"x\"],\n]\n",
            "a=1\nb =2\n",
            "a = \"x\u{1}\"\n",
            "a = \"x\u{7f}\"\n",
            "a = 'x\u{1}'\n",
            "a = \"x\ry\"\n",
            "a = 1 2\n",
            "a = [1,,2]\n",
            "[a]]\n",
            "[a\n",
            "a = \"open\n",
            "a = \"esc \\\"\n",
            "a =\n",
            "= 1\n",
            "a = 1\rb = 2\n",
            "a = [1\r 2]\n",
            "a = 0x1F\nb = 1e3\nc = -inf\nd = +1.5\ne = 1_000\n",
            "a = 01\n",
            "a = truee\n",
            "d = 1979-05-27 07:32:00\n",
            "t = 07:32:00\n",
            "a = \"\\u00E9\\t\"\n",
            "a\u{c} = 1\n",
            "a = 1\u{c}\n",
        ] {
            same(doc);
            same(&format!("[first]\nx = \"plain\"\n[second]\n{doc}"));
        }
        // Taken by the plain scanner and refused by the decoders, as by `toml`.
        for doc in [
            "a = \"x\u{1}\"\n",
            "a = 'x\u{7f}'\n",
            "a = truee\n",
            "a = 01\n",
        ] {
            assert!(toml::from_str::<toml::Value>(doc).is_err(), "{doc}");
            assert!(same(doc).is_none(), "{doc}");
        }
    }

    /// The manifest's own types, through both readers.
    #[test]
    fn typed_values_agree() {
        #[derive(Debug, PartialEq, serde::Deserialize)]
        struct T {
            n: u32,
            o: Option<String>,
            #[serde(default)]
            v: Vec<String>,
            m: BTreeMap<String, String>,
            t: Vec<BTreeMap<String, i64>>,
        }
        let doc =
            "n = 7\nv = [\"a\", 'b']\n[m]\n\"x/y.py\" = \"1\"\nk = \"2\"\n[[t]]\na = 1\n[[t]]\n";
        let full: T = toml::from_str(doc).unwrap();
        let fast: T = from_str(doc).unwrap();
        assert_eq!(full, fast);
        // A field of the wrong type: no answer (the full reader names the line).
        assert!(from_str::<T>("n = \"seven\"\n[m]\n").is_none());
        assert!(from_str::<T>("n = -1\n[m]\n").is_none());
    }
}
