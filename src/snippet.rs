//! Error messages with a snippet of the file pointing at the offending line.
//!
//! The first line is always the plain one-line message (`error: FILE[:LINE:COL]: ELEMENT: key
//! 'KEY': WHAT`), so that scripts can grep it; a snippet follows when the place can be found.
//! Syntax errors carry their line and column. For errors about an element and a key, the file is
//! parsed once more into a tree of spans (TOML through the `toml` crate's spanned tables, JSON
//! through the small scanner below), and the element is found by its id (or its position in
//! `nodes`/`links`), then the key inside it. When nothing matches, there is no snippet.

use ariadne::{Config, IndexType, Label, Report, ReportKind, Source};
use ringmain_core::error::Element;
use ringmain_core::{Format, ModelError};
use std::ops::Range;

/// Longest stretch of one line shown, in characters (a 50 MB one-line file must not be echoed).
const MAX_LINE: usize = 160;

/// A parsed value with the byte ranges of its parts.
#[derive(Debug)]
enum Spanned {
    /// A string (its text) or another scalar (`None`).
    Scalar(Option<String>),
    /// Items with their value spans.
    Array(Vec<(Range<usize>, Spanned)>),
    /// Entries: key, key span, value span, value.
    Table(Vec<(String, Range<usize>, Range<usize>, Spanned)>),
}

impl Spanned {
    fn get(&self, key: &str) -> Option<(&Range<usize>, &Range<usize>, &Spanned)> {
        match self {
            Spanned::Table(entries) => entries.iter().find(|e| e.0 == key).map(|e| (&e.1, &e.2, &e.3)),
            _ => None,
        }
    }
}

fn from_toml(v: &toml::de::DeValue<'_>) -> Spanned {
    use toml::de::DeValue;
    match v {
        DeValue::String(s) => Spanned::Scalar(Some(s.to_string())),
        DeValue::Array(items) => Spanned::Array(items.iter().map(|i| (i.span(), from_toml(i.get_ref()))).collect()),
        DeValue::Table(t) => Spanned::Table(
            t.iter().map(|(k, v)| (k.get_ref().to_string(), k.span(), v.span(), from_toml(v.get_ref()))).collect(),
        ),
        _ => Spanned::Scalar(None),
    }
}

fn parse_toml(text: &str) -> Option<Spanned> {
    let table = toml::de::DeTable::parse(text).ok()?;
    Some(Spanned::Table(
        table
            .get_ref()
            .iter()
            .map(|(k, v)| (k.get_ref().to_string(), k.span(), v.span(), from_toml(v.get_ref())))
            .collect(),
    ))
}

/// A JSON scanner that keeps spans; only run on text that already parsed, but it never panics
/// on anything (it gives up instead).
struct Json<'a> {
    b: &'a [u8],
    i: usize,
}

impl Json<'_> {
    fn ws(&mut self) {
        while self.i < self.b.len() && matches!(self.b[self.i], b' ' | b'\t' | b'\n' | b'\r') {
            self.i += 1;
        }
    }

    fn string(&mut self) -> Option<String> {
        if self.b.get(self.i) != Some(&b'"') {
            return None;
        }
        self.i += 1;
        let mut out: Vec<u16> = Vec::new();
        let mut bytes: Vec<u8> = Vec::new();
        loop {
            let c = *self.b.get(self.i)?;
            self.i += 1;
            match c {
                b'"' => break,
                b'\\' => {
                    let e = *self.b.get(self.i)?;
                    self.i += 1;
                    let simple = match e {
                        b'"' => Some(b'"'),
                        b'\\' => Some(b'\\'),
                        b'/' => Some(b'/'),
                        b'b' => Some(8),
                        b'f' => Some(12),
                        b'n' => Some(b'\n'),
                        b'r' => Some(b'\r'),
                        b't' => Some(b'\t'),
                        _ => None,
                    };
                    if let Some(s) = simple {
                        bytes.push(s);
                    } else if e == b'u' {
                        let hex = std::str::from_utf8(self.b.get(self.i..self.i + 4)?).ok()?;
                        self.i += 4;
                        let unit = u16::from_str_radix(hex, 16).ok()?;
                        // Flush plain bytes, then collect UTF-16 units (surrogate pairs join).
                        out.extend(String::from_utf8(std::mem::take(&mut bytes)).ok()?.encode_utf16());
                        out.push(unit);
                    } else {
                        return None;
                    }
                }
                _ => bytes.push(c),
            }
        }
        out.extend(String::from_utf8(bytes).ok()?.encode_utf16());
        String::from_utf16(&out).ok()
    }

    fn value(&mut self, depth: usize) -> Option<(Range<usize>, Spanned)> {
        if depth > 64 {
            return None;
        }
        self.ws();
        let start = self.i;
        let v = match *self.b.get(self.i)? {
            b'{' => {
                self.i += 1;
                let mut entries = Vec::new();
                self.ws();
                if self.b.get(self.i) == Some(&b'}') {
                    self.i += 1;
                } else {
                    loop {
                        self.ws();
                        let ks = self.i;
                        let key = self.string()?;
                        let kr = ks..self.i;
                        self.ws();
                        if self.b.get(self.i) != Some(&b':') {
                            return None;
                        }
                        self.i += 1;
                        let (vr, v) = self.value(depth + 1)?;
                        entries.push((key, kr, vr, v));
                        self.ws();
                        match *self.b.get(self.i)? {
                            b',' => self.i += 1,
                            b'}' => {
                                self.i += 1;
                                break;
                            }
                            _ => return None,
                        }
                    }
                }
                Spanned::Table(entries)
            }
            b'[' => {
                self.i += 1;
                let mut items = Vec::new();
                self.ws();
                if self.b.get(self.i) == Some(&b']') {
                    self.i += 1;
                } else {
                    loop {
                        items.push(self.value(depth + 1)?);
                        self.ws();
                        match *self.b.get(self.i)? {
                            b',' => self.i += 1,
                            b']' => {
                                self.i += 1;
                                break;
                            }
                            _ => return None,
                        }
                    }
                }
                Spanned::Array(items)
            }
            b'"' => Spanned::Scalar(Some(self.string()?)),
            _ => {
                while self.i < self.b.len()
                    && !matches!(self.b[self.i], b',' | b'}' | b']' | b' ' | b'\t' | b'\n' | b'\r')
                {
                    self.i += 1;
                }
                if self.i == start {
                    return None;
                }
                Spanned::Scalar(None)
            }
        };
        Some((start..self.i, v))
    }
}

fn parse_json(text: &str) -> Option<Spanned> {
    Json { b: text.as_bytes(), i: 0 }.value(0).map(|(_, v)| v)
}

/// Walks a key path such as `groups[2].min_pressure` or `source_capacity.Works` inside `table`;
/// returns the span of the last key found.
fn walk(mut table: &Spanned, path: &str) -> Option<Range<usize>> {
    let mut rest = path;
    let mut found = None;
    while !rest.is_empty() {
        // The longest prefix up to a '.' that is a key here (ids may contain dots).
        let mut cut = rest.len();
        let hit = loop {
            let (head, index) = split_index(&rest[..cut]);
            if let Some(hit) = table.get(head) {
                break Some((hit, index, cut));
            }
            match rest[..cut].rfind('.') {
                Some(dot) => cut = dot,
                None => break None,
            }
        };
        let ((key_span, _, value), index, cut) = hit?;
        found = Some(key_span.clone());
        table = value;
        if let (Some(n), Spanned::Array(items)) = (index, value) {
            let (span, item) = items.get(n.checked_sub(1)?)?;
            found = Some(span.clone());
            table = item;
        }
        rest = rest[cut..].strip_prefix('.').unwrap_or("");
    }
    found
}

/// `groups[2]` → (`groups`, Some(2)).
fn split_index(segment: &str) -> (&str, Option<usize>) {
    if let Some(open) = segment.rfind('[') {
        if let Some(n) = segment[open + 1..].strip_suffix(']').and_then(|n| n.parse().ok()) {
            return (&segment[..open], Some(n));
        }
    }
    (segment, None)
}

/// The byte range an error points at in `text`, if it can be found.
pub fn locate(error: &ModelError, text: &str, format: Format) -> Option<Range<usize>> {
    if let Some((line, col)) = error.position {
        return offset_of(text, line, col).map(|o| o..next_char(text, o));
    }
    let tree = match format {
        Format::Toml => parse_toml(text)?,
        Format::Json => parse_json(text)?,
    };
    let element = error.element.as_ref()?;
    let entry = |array: &str, pick: &dyn Fn(usize, &Spanned) -> bool| -> Option<(Range<usize>, &Spanned)> {
        let (_, _, Spanned::Array(items)) = tree.get(array)? else { return None };
        items.iter().enumerate().find(|(i, (_, v))| pick(*i, v)).map(|(_, (r, v))| (r.clone(), v))
    };
    let has_id = |v: &Spanned, want: &str| matches!(v.get("id"), Some((_, _, Spanned::Scalar(Some(id)))) if id == want);
    let (element_span, table) = match element {
        Element::Node(id) => entry("nodes", &|_, v| has_id(v, id))?,
        Element::Link(id) => entry("links", &|_, v| has_id(v, id))?,
        Element::NodeEntry(n) => entry("nodes", &|i, _| i == *n)?,
        Element::LinkEntry(n) => entry("links", &|i, _| i == *n)?,
        Element::Table(name) => match tree.get(name) {
            Some((key_span, _, v)) => (key_span.clone(), v),
            // A separate criteria file may hold the criteria at the top level.
            None if name == "criteria" => (0..0, &tree),
            None => return None,
        },
        _ => return None,
    };
    let key_span = error.key.as_deref().and_then(|k| walk(table, k));
    let id_span = table.get("id").map(|(k, _, _)| k.clone());
    let span = key_span.or(id_span).unwrap_or(element_span);
    (span.end > span.start).then_some(span)
}

fn next_char(text: &str, offset: usize) -> usize {
    text[offset..].chars().next().map_or(offset, |c| offset + c.len_utf8())
}

/// Byte offset of 1-based line and column (columns in characters).
fn offset_of(text: &str, line: usize, col: usize) -> Option<usize> {
    let mut start = 0;
    for _ in 1..line {
        start += text[start..].find('\n')? + 1;
    }
    let line_text = &text[start..text[start..].find('\n').map_or(text.len(), |e| start + e)];
    let within = line_text.char_indices().nth(col.saturating_sub(1)).map_or(line_text.len(), |(i, _)| i);
    Some(start + within)
}

/// The line of `span`, cut to [`MAX_LINE`] characters around the span and with control
/// characters made visible, after as many empty lines as precede it in `text`; returns the
/// excerpt and the span in it.
fn excerpt(text: &str, span: &Range<usize>) -> (String, Range<usize>) {
    let line_start = text[..span.start].rfind('\n').map_or(0, |i| i + 1);
    let first_line = text[..line_start].matches('\n').count();
    let line_end = text[span.start..].find('\n').map_or(text.len(), |e| span.start + e);
    let mut out = String::new();
    let mut out_span = 0..0;
    let mut push_line = |out: &mut String, from: usize, to: usize, mark: Option<&Range<usize>>| {
        let line = &text[from..to];
        let centre = mark.map_or(0, |m| text[from..m.start].chars().count());
        let skip = centre.saturating_sub(MAX_LINE / 2);
        if skip > 0 {
            out.push('…');
        }
        for (n, (i, c)) in line.char_indices().enumerate().skip(skip) {
            if n >= skip + MAX_LINE {
                out.push('…');
                break;
            }
            if let Some(m) = mark {
                if from + i == m.start {
                    out_span.start = out.len();
                }
            }
            out.push(if c.is_control() && c != '\t' { '\u{fffd}' } else { c });
            if let Some(m) = mark {
                if from + i + c.len_utf8() <= m.end {
                    out_span.end = out.len();
                }
            }
        }
        if let Some(m) = mark {
            if m.start >= to {
                out_span = out.len()..out.len();
            }
        }
        out.push('\n');
    };
    // Blank lines before the excerpt make the snippet's line numbers those of the file (the
    // renderer's own line offset is not applied to its gutter).
    out.push_str(&"\n".repeat(first_line));
    let end = span.end.min(line_end).max(span.start);
    push_line(&mut out, line_start, line_end, Some(&(span.start..end)));
    if out_span.end < out_span.start {
        out_span.end = out_span.start;
    }
    (out, out_span)
}

/// The message for `error`: the plain line, then a snippet when `text` shows where.
pub fn render(error: &ModelError, text: Option<&str>, format: Format, color: bool) -> String {
    let mut out = format!("error: {error}\n");
    let Some(text) = text else { return out };
    let Some(span) = locate(error, text, format) else { return out };
    let (snippet, mut at) = excerpt(text, &span);
    if at.end <= at.start {
        at.end = (at.start + 1).min(snippet.len());
    }
    let name = error.file.clone().unwrap_or_else(|| "input".into());
    let label = match (&error.key, error.position) {
        (_, Some(_)) => "here".to_owned(),
        (Some(k), None) => format!("key '{}'", ringmain_core::error::printable(k)),
        (None, None) => "this element".to_owned(),
    };
    let mut buf = Vec::new();
    let report = Report::build(ReportKind::Error, (name.as_str(), at.clone()))
        .with_config(Config::default().with_color(color).with_index_type(IndexType::Byte))
        .with_message(&error.message)
        .with_label(Label::new((name.as_str(), at)).with_message(label))
        .finish();
    if report.write((name.as_str(), Source::from(snippet)), &mut buf).is_ok() {
        // The report's own first line repeats the message of the line above: shown once.
        let text = String::from_utf8_lossy(&buf);
        out.push_str(text.split_once('\n').map_or(&text, |(_, rest)| rest));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    const TOML: &str = "[[nodes]]\nid = \"R\"\nkind = \"reservoir\"\nhead = 5\n\n[[nodes]]\nid = \"J\"\nelevation = 1\ndemand = \"x\"\n";

    fn err(element: Element, key: &str) -> ModelError {
        ModelError::at(Some(element), Some(key), "bad")
    }

    fn line_of(text: &str, span: Range<usize>) -> usize {
        text[..span.start].matches('\n').count() + 1
    }

    #[test]
    fn finds_keys_of_elements_in_toml_and_json() {
        let s = locate(&err(Element::Node("J".into()), "demand"), TOML, Format::Toml).unwrap();
        assert_eq!(line_of(TOML, s.clone()), 9);
        assert_eq!(&TOML[s], "demand");
        let json = "{\"nodes\": [\n {\"id\": \"R\", \"kind\": \"reservoir\", \"head\": 5},\n {\"id\": \"J\",\n  \"demand\": \"x\"}]}";
        let s = locate(&err(Element::Node("J".into()), "demand"), json, Format::Json).unwrap();
        assert_eq!(line_of(json, s.clone()), 4);
        assert_eq!(&json[s], "\"demand\"");
        // A missing key points at the element's id.
        let s = locate(&err(Element::Node("J".into()), "head"), TOML, Format::Toml).unwrap();
        assert_eq!(line_of(TOML, s), 7);
        // An element that is not in the text: no snippet.
        assert!(locate(&err(Element::Link("Q".into()), "to"), TOML, Format::Toml).is_none());
    }

    #[test]
    fn finds_criteria_paths() {
        let text = "[criteria]\nmin_pressure = 1\n[[criteria.groups]]\nzone = \"a\"\n[[criteria.groups]]\nzone = \"b\"\nmin_pressure = \"x\"\n";
        let s = locate(&err(Element::Table("criteria".into()), "groups[2].min_pressure"), text, Format::Toml).unwrap();
        assert_eq!(line_of(text, s), 7);
        let top = "min_pressure = \"20 M\"\n";
        let s = locate(&err(Element::Table("criteria".into()), "min_pressure"), top, Format::Toml).unwrap();
        assert_eq!(line_of(top, s), 1);
    }

    #[test]
    fn long_and_binary_lines_are_cut() {
        let text = format!("{}\u{1}bad{}", "x".repeat(10_000), "y".repeat(10_000));
        let mut e = ModelError::new("bad");
        e.position = Some((1, 10_001));
        let out = render(&e.in_file("f.toml"), Some(&text), Format::Toml, false);
        assert!(out.starts_with("error: f.toml:1:10001: bad\n"), "{out}");
        assert!(out.len() < 2_000, "{}", out.len());
        assert!(!out.contains('\u{1}'));
    }
}
