//! Fast readers of model files in one pass: JSON and TOML parsed straight from bytes (a slice in
//! memory, or a file read in large chunks), element by element, into the model.
//!
//! These readers are an accelerator, never a judge. Each knows the common shape of a model file
//! and **gives up** (`None`) on anything it is not sure of: a syntax error, an escape in a
//! string, a number it cannot read exactly as the whole-text reader does, a duplicate key, keys
//! in an order one pass cannot take, any model error. The caller then reads the file with the
//! whole-text reader ([`super::read_str`]), which accepts everything valid and gives every
//! error with its line and column. A model read here equals the one the whole-text reader builds
//! from the same text (the tests compare them), so which reader ran is invisible.
//!
//! Why not a general parser: serde_json's reader goes through a visitor per value and reads
//! about 80–100 MB/s on model files; the `toml` crate builds the whole document (with spans)
//! before anything can be read from it, some 10 times the file's size in memory. A model file
//! is a few levels deep and its elements are small tables, so a direct parser of bytes into the
//! same value tree, one element at a time, is both simpler and several times faster.
//!
//! Numbers: integers of up to 18 digits are exact; decimals of up to 2^53 in their digits and a
//! decimal exponent within ±22 (nearly every number of a model file) by Clinger's exact fast
//! path (`exact_float`); other numbers by the standard library's correctly rounded `f64`
//! parser. Both give the result serde_json gives with its `float_roundtrip` feature (enabled in
//! this workspace for that reason) and the `toml` crate gives.
//!
//! A large JSON or TOML text is read by two threads (see `add_parsed`): this one parses, a helper
//! adds the elements to the model in the order of the file, so that the model, and every
//! message of the reader it falls back to, is the same as one thread's.

use super::read;
use super::tree::{self, Value, MAX_DEPTH};
use crate::model::{
    plain_id, same_bytes, word_of, HeadLossLaw, Link, LinkKind, LinkStatus, Model, NewIds, Node, NodeKind, Pipe,
};
use std::io::Read;

/// Why a step stopped.
#[derive(Debug)]
enum Stop {
    /// Anything this reader does not take: the caller falls back to the whole-text reader.
    GiveUp,
    /// The bytes ran out before the end of the text (read more and try the step again).
    More,
}

type Step<T> = Result<T, Stop>;

/// Initial table capacity: the most keys a node or link of a written model has.
const TABLE_CAPACITY: usize = 10;

/// A position in the bytes read so far.
struct Cursor<'a> {
    b: &'a [u8],
    i: usize,
    /// Whether `b` ends where the text ends.
    end: bool,
}

impl<'a> Cursor<'a> {
    /// Stops at the end of the bytes: the text is cut short, or more must be read.
    fn out(&self) -> Stop {
        if self.end {
            Stop::GiveUp
        } else {
            Stop::More
        }
    }

    /// JSON white space: space, tab, line feed, carriage return.
    #[inline]
    fn json_space(&mut self) -> Step<u8> {
        loop {
            match self.b.get(self.i) {
                Some(b' ' | b'\n' | b'\r' | b'\t') => self.i += 1,
                Some(&c) => return Ok(c),
                None => return Err(self.out()),
            }
        }
    }

    fn expect(&mut self, c: u8) -> Step<()> {
        if self.json_space()? == c {
            self.i += 1;
            Ok(())
        } else {
            Err(Stop::GiveUp)
        }
    }

    /// A string without escapes (the opening quote is at the cursor); its text.
    fn plain_string(&mut self) -> Step<&'a str> {
        let start = self.i + 1;
        let mut j = start;
        // Eight bytes at a time up to the first that is not plain ASCII text (most ids and
        // names end within the first word); the loop below judges that byte and what follows.
        while let Some(w) = self.b.get(j..j + 8) {
            match special_bytes(word_of(w)) {
                0 => j += 8,
                flags => {
                    j += (flags.trailing_zeros() / 8) as usize;
                    break;
                }
            }
        }
        let mut ascii = true;
        loop {
            match self.b.get(j) {
                Some(b'"') => break,
                // An escape or a control character: left to the whole-text reader.
                Some(b'\\' | 0..=0x1f) => return Err(Stop::GiveUp),
                Some(&c) => {
                    ascii &= c < 0x80;
                    j += 1;
                }
                None => return Err(self.out()),
            }
        }
        let bytes = &self.b[start..j];
        self.i = j + 1;
        if ascii {
            // SAFETY: every byte is ASCII, so the bytes are UTF-8.
            Ok(unsafe { std::str::from_utf8_unchecked(bytes) })
        } else {
            std::str::from_utf8(bytes).map_err(|_| Stop::GiveUp)
        }
    }

    /// A JSON number at the cursor.
    fn json_number(&mut self) -> Step<Value> {
        let start = self.i;
        let b = self.b;
        let mut j = start;
        let negative = b.get(j) == Some(&b'-');
        if negative {
            j += 1;
        }
        let digits = |j: &mut usize| -> Step<usize> {
            let from = *j;
            while let Some(c) = b.get(*j) {
                if !c.is_ascii_digit() {
                    return Ok(*j - from);
                }
                *j += 1;
            }
            Err(self.out())
        };
        let int_start = j;
        let n_int = digits(&mut j)?;
        if n_int == 0 || (n_int > 1 && b[int_start] == b'0') {
            return Err(Stop::GiveUp);
        }
        let mut float = false;
        if b.get(j) == Some(&b'.') {
            j += 1;
            if digits(&mut j)? == 0 {
                return Err(Stop::GiveUp);
            }
            float = true;
        }
        if matches!(b.get(j), Some(b'e' | b'E')) {
            j += 1;
            if matches!(b.get(j), Some(b'+' | b'-')) {
                j += 1;
            }
            if digits(&mut j)? == 0 {
                return Err(Stop::GiveUp);
            }
            float = true;
        }
        // The number must be followed by something (more digits may still be unread).
        if j == b.len() && !self.end {
            return Err(Stop::More);
        }
        self.i = j;
        let text = &b[start..j];
        if !float {
            // Up to 18 digits fit in i64 exactly; longer ones (rare) are left to the other reader,
            // as is "-0" (a float there).
            if n_int > 18 {
                return Err(Stop::GiveUp);
            }
            let mut v: i64 = 0;
            for &c in &b[int_start..j] {
                v = v * 10 + i64::from(c - b'0');
            }
            if negative {
                if v == 0 {
                    return Err(Stop::GiveUp);
                }
                v = -v;
            }
            return Ok(Value::Int(v));
        }
        float_of(text)
    }
}

impl Cursor<'_> {
    /// A JSON number at the cursor as `f64`: the value [`Cursor::json_number`] gives (an integer
    /// converted exactly), read in one pass when it has the common short form (an optional minus,
    /// an integer part without a leading zero, an optional fraction, no exponent, at most 19
    /// digits whose integer is at most 2^53: Clinger's fast path of [`exact_float`], one
    /// correctly rounded quotient). Anything else is read again by `json_number`.
    #[inline]
    fn flat_number(&mut self) -> Step<f64> {
        let b = self.b;
        let start = self.i;
        let negative = b.get(start) == Some(&b'-');
        let int_start = start + usize::from(negative);
        let mut j = int_start;
        let mut m: u64 = 0;
        // Wrapping: a long run of digits is refused below by its count, whatever `m` became.
        let mut digits = |j: &mut usize| {
            let from = *j;
            while let Some(d) = b.get(*j).map(|c| c.wrapping_sub(b'0')).filter(|&d| d <= 9) {
                m = m.wrapping_mul(10).wrapping_add(u64::from(d));
                *j += 1;
            }
            *j - from
        };
        let n_int = digits(&mut j);
        let dot = b.get(j) == Some(&b'.');
        let n_frac = if dot {
            j += 1;
            digits(&mut j)
        } else {
            0
        };
        // The common form, whatever the size of its digits' integer.
        let common =
            n_int >= 1 && (n_int == 1 || b[int_start] != b'0') && (!dot || n_frac >= 1) && n_int + n_frac <= 19;
        let short = common
            && m <= 1 << 53
            // "-0" is an integer the other readers take as a float: `json_number` gives it up.
            && (dot || !negative || m != 0);
        match b.get(j) {
            Some(&t) if short && t != b'e' && t != b'E' => {
                self.i = j;
                // n_frac ≤ 19 < 23: the power is exact.
                let v = if dot { m as f64 / EXACT_POWERS[n_frac] } else { m as f64 };
                Ok(if negative { -v } else { v })
            }
            // A fraction of up to 19 digits whose integer is beyond 2^53 (a demand written to 17
            // digits, say): the standard library's correctly rounded parser on its text, where
            // `json_number` would come to by way of `float_of`, without reading the digits twice
            // more. At most 19 digits, one of them not zero: the value is finite and not zero.
            Some(&t) if common && dot && t != b'e' && t != b'E' => {
                self.i = j;
                // SAFETY: a sign, digits and a point: ASCII.
                let text = unsafe { std::str::from_utf8_unchecked(&b[start..j]) };
                text.parse().map_err(|_| Stop::GiveUp)
            }
            // More digits may follow in bytes not yet read (anything else at the end of the
            // bytes is the general reader's to judge).
            None if common && !self.end => Err(Stop::More),
            _ => {
                self.i = start;
                match self.json_number()? {
                    Value::Int(i) => Ok(i as f64),
                    Value::Float(f) => Ok(f),
                    _ => Err(Stop::GiveUp),
                }
            }
        }
    }
}

/// A decimal number's text (JSON or TOML syntax without underscores) as `f64`, correctly
/// rounded; gives up where the other readers refuse or differ (out of range).
fn float_of(text: &[u8]) -> Step<Value> {
    if let Some(v) = exact_float(text) {
        return Ok(Value::Float(v));
    }
    // SAFETY: the callers pass digits, signs, '.', 'e' and 'E' only: ASCII.
    let s = unsafe { std::str::from_utf8_unchecked(text) };
    let v: f64 = s.parse().map_err(|_| Stop::GiveUp)?;
    if !v.is_finite() || (v == 0.0 && mantissa_nonzero(text)) {
        return Err(Stop::GiveUp);
    }
    Ok(Value::Float(v))
}

/// The powers of ten that are exact in `f64` (up to 10^22 = 2^22 · 5^22, and 5^22 < 2^53).
const EXACT_POWERS: [f64; 23] = [
    1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20,
    1e21, 1e22,
];

/// A decimal number's value by the fast path of Clinger (1990, "How to read floating point
/// numbers accurately", PLDI): when its digits, read as an integer `m`, are at most 2^53 and its
/// decimal exponent `e` is within ±22, both `m` and 10^|e| are exact in `f64`, so the one product
/// or quotient `m · 10^e` is the correctly rounded value (IEEE 754 rounds each operation
/// correctly), the same `f64` the standard library's parser gives. `None`: not on the fast
/// path (the caller parses it in full). `text` is the grammar of [`Cursor::json_number`].
#[inline]
fn exact_float(text: &[u8]) -> Option<f64> {
    let (negative, digits) = match text.split_first() {
        Some((b'-', rest)) => (true, rest),
        _ => (false, text),
    };
    let mut m: u64 = 0;
    let mut count = 0usize;
    let mut scale: i64 = 0;
    let mut i = 0;
    let mut fraction = false;
    while let Some(&c) = digits.get(i) {
        match c {
            b'0'..=b'9' => {
                // Leading zeros add no digit that could overflow.
                if m != 0 || c != b'0' {
                    count += 1;
                }
                if count > 19 {
                    return None;
                }
                m = m * 10 + u64::from(c - b'0');
                if fraction {
                    scale -= 1;
                }
            }
            b'.' => fraction = true,
            b'e' | b'E' => break,
            _ => return None,
        }
        i += 1;
    }
    if i < digits.len() {
        // The exponent: a sign and at most four digits (longer ones are the full parser's).
        let mut exp = &digits[i + 1..];
        let minus = match exp.first() {
            Some(b'-') => {
                exp = &exp[1..];
                true
            }
            Some(b'+') => {
                exp = &exp[1..];
                false
            }
            _ => false,
        };
        if exp.is_empty() || exp.len() > 4 {
            return None;
        }
        let mut e: i64 = 0;
        for &c in exp {
            if !c.is_ascii_digit() {
                return None;
            }
            e = e * 10 + i64::from(c - b'0');
        }
        scale += if minus { -e } else { e };
    }
    const MAX_EXACT: u64 = 1 << 53;
    if m > MAX_EXACT {
        return None;
    }
    let v = if m == 0 {
        0.0
    } else if (0..=22).contains(&scale) {
        m as f64 * EXACT_POWERS[scale as usize]
    } else if (-22..0).contains(&scale) {
        m as f64 / EXACT_POWERS[(-scale) as usize]
    } else {
        return None;
    };
    Some(if negative { -v } else { v })
}

/// Whether the digits before the exponent are not all zero (an underflow to zero is left to the
/// other reader).
fn mantissa_nonzero(text: &[u8]) -> bool {
    text.iter().take_while(|c| !matches!(c, b'e' | b'E')).any(|c| (b'1'..=b'9').contains(c))
}

/// A JSON value into the same tree serde_json gives through [`tree::Seed`].
fn json_value(c: &mut Cursor, depth: usize) -> Step<Value> {
    match c.json_space()? {
        b'"' => Ok(Value::Str(c.plain_string()?.to_owned())),
        b'{' => {
            if depth >= MAX_DEPTH {
                return Err(Stop::GiveUp);
            }
            c.i += 1;
            let mut entries: Vec<(tree::Key, Value)> = Vec::with_capacity(TABLE_CAPACITY);
            if c.json_space()? == b'}' {
                c.i += 1;
                return Ok(Value::Table(entries));
            }
            loop {
                if c.json_space()? != b'"' {
                    return Err(Stop::GiveUp);
                }
                let key = c.plain_string()?;
                // Duplicates (an error), and the TOML date marker, are the other reader's.
                if key.starts_with('$') || entries.iter().any(|(k, _)| k == key) || entries.len() > 64 {
                    return Err(Stop::GiveUp);
                }
                let key = tree::key(key);
                c.expect(b':')?;
                let value = json_value(c, depth + 1)?;
                entries.push((key, value));
                match c.json_space()? {
                    b',' => c.i += 1,
                    b'}' => {
                        c.i += 1;
                        return Ok(Value::Table(entries));
                    }
                    _ => return Err(Stop::GiveUp),
                }
            }
        }
        b'[' => {
            if depth >= MAX_DEPTH {
                return Err(Stop::GiveUp);
            }
            c.i += 1;
            let mut items = Vec::new();
            if c.json_space()? == b']' {
                c.i += 1;
                return Ok(Value::Array(items));
            }
            loop {
                items.push(json_value(c, depth + 1)?);
                match c.json_space()? {
                    b',' => c.i += 1,
                    b']' => {
                        c.i += 1;
                        return Ok(Value::Array(items));
                    }
                    _ => return Err(Stop::GiveUp),
                }
            }
        }
        b't' => word(c, b"true", Value::Bool(true)),
        b'f' => word(c, b"false", Value::Bool(false)),
        b'-' | b'0'..=b'9' => c.json_number(),
        _ => Err(Stop::GiveUp),
    }
}

fn word(c: &mut Cursor, w: &[u8], v: Value) -> Step<Value> {
    let have = &c.b[c.i..];
    if have.len() < w.len() {
        return if w.starts_with(have) { Err(c.out()) } else { Err(Stop::GiveUp) };
    }
    if &have[..w.len()] != w {
        return Err(Stop::GiveUp);
    }
    c.i += w.len();
    Ok(v)
}

/// Bytes to parse: a slice held whole, or a file read in chunks.
trait Feed {
    /// Runs `f` from the current position; on [`Stop::More`] reads more and runs it again from
    /// the same position. `None`: give up.
    fn step<T>(&mut self, f: impl FnMut(&mut Cursor) -> Step<T>) -> Option<T>;

    /// Whether the text is large enough to be read by two threads (see [`json_elements`]).
    fn large(&self) -> bool;
}

struct SliceFeed<'a> {
    b: &'a [u8],
    i: usize,
}

impl Feed for SliceFeed<'_> {
    fn large(&self) -> bool {
        self.b.len() >= TWO_THREADS_ABOVE
    }

    fn step<T>(&mut self, mut f: impl FnMut(&mut Cursor) -> Step<T>) -> Option<T> {
        let mut c = Cursor { b: self.b, i: self.i, end: true };
        let v = f(&mut c).ok()?;
        self.i = c.i;
        Some(v)
    }
}

/// Chunk read from a file at a time (a step longer than this grows the buffer).
const CHUNK: usize = 4 << 20;

struct ReadFeed<R> {
    src: R,
    /// The bytes read and not yet dropped are `buf[..len]`; the rest is room to read into,
    /// zeroed once when the buffer grows rather than at every read.
    buf: Vec<u8>,
    len: usize,
    i: usize,
    end: bool,
    /// Bytes read in all; more than `limit` is given up (the caller's size limit then speaks).
    total: u64,
    limit: u64,
    chunk: usize,
}

impl<R: Read> ReadFeed<R> {
    fn new(src: R, limit: u64, chunk: usize) -> Self {
        ReadFeed { src, buf: Vec::new(), len: 0, i: 0, end: false, total: 0, limit, chunk }
    }

    /// Keeps the unread bytes and reads at least one more chunk (or to the end).
    fn refill(&mut self) -> Option<()> {
        self.buf.copy_within(self.i..self.len, 0);
        self.len -= self.i;
        self.i = 0;
        let keep = self.len;
        let want = keep + self.chunk;
        if self.buf.len() < want {
            self.buf.resize(want, 0);
        }
        let mut have = keep;
        while have < want {
            match self.src.read(&mut self.buf[have..]) {
                Ok(0) => {
                    self.end = true;
                    break;
                }
                Ok(n) => have += n,
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
                Err(_) => return None,
            }
        }
        self.len = have;
        self.total += (have - keep) as u64;
        (self.total <= self.limit).then_some(())
    }
}

impl<R: Read> Feed for ReadFeed<R> {
    /// Large: more than what is already read remains, or what is read is large.
    fn large(&self) -> bool {
        !self.end || self.len - self.i >= TWO_THREADS_ABOVE
    }

    fn step<T>(&mut self, mut f: impl FnMut(&mut Cursor) -> Step<T>) -> Option<T> {
        loop {
            let mut c = Cursor { b: &self.buf[..self.len], i: self.i, end: self.end };
            match f(&mut c) {
                Ok(v) => {
                    self.i = c.i;
                    return Some(v);
                }
                Err(Stop::GiveUp) => return None,
                Err(Stop::More) if self.end => return None,
                Err(Stop::More) => self.refill()?,
            }
        }
    }
}

/// Reads a JSON model from a text in memory in one pass; `None`: give up (see the module docs).
pub(crate) fn json_from_slice(text: &[u8]) -> Option<Model> {
    let text = text.strip_prefix("\u{feff}".as_bytes()).unwrap_or(text);
    json_model(&mut SliceFeed { b: text, i: 0 })
}

/// Reads a JSON model from `src` in one pass, a chunk at a time (memory holds the model and a
/// chunk); gives up beyond `limit` bytes. `None`: give up (see the module docs).
pub fn json_from_reader<R: Read>(src: R, limit: u64) -> Option<Model> {
    json_from_chunks(src, limit, CHUNK)
}

fn json_from_chunks<R: Read>(src: R, limit: u64, chunk: usize) -> Option<Model> {
    let mut feed = ReadFeed::new(src, limit, chunk);
    // A byte-order mark is not part of the text.
    feed.step(|c| {
        if c.b.len() - c.i < 3 && !c.end {
            return Err(Stop::More);
        }
        if c.b[c.i..].starts_with("\u{feff}".as_bytes()) {
            c.i += 3;
        }
        Ok(())
    })?;
    json_model(&mut feed)
}

/// The top-level object: settings, then `nodes`, then `links` (and `controls` anywhere), the order
/// [`super::write`] writes; any other order gives up.
fn json_model(feed: &mut impl Feed) -> Option<Model> {
    feed.step(|c| c.expect(b'{'))?;
    let mut settings: Vec<(tree::Key, Value)> = Vec::new();
    let mut model: Option<Model> = None;
    let mut controls: Option<Value> = None;
    let mut seen: Vec<String> = Vec::new();
    let mut first = true;
    loop {
        // `}` or (`,` unless first) then a key and its colon.
        let key = feed.step(|c| {
            let t = c.json_space()?;
            if t == b'}' {
                c.i += 1;
                return Ok(None);
            }
            if !first {
                // `{ ..., }` (a trailing comma) is the other reader's error.
                if t != b',' {
                    return Err(Stop::GiveUp);
                }
                c.i += 1;
            }
            if c.json_space()? != b'"' {
                return Err(Stop::GiveUp);
            }
            let k = c.plain_string()?.to_owned();
            c.expect(b':')?;
            Ok(Some(k))
        })?;
        let Some(key) = key else { break };
        first = false;
        if seen.contains(&key) {
            return None;
        }
        match key.as_str() {
            "nodes" => {
                let mut top = read::top_fields(std::mem::take(&mut settings));
                let mut m = read::settings_model(&mut top)?;
                json_elements(feed, &mut m, true)?;
                model = Some(m);
            }
            "links" => {
                let m = model.as_mut()?;
                json_elements(feed, m, false)?;
            }
            "controls" => controls = Some(feed.step(|c| json_value(c, 1))?),
            _ if model.is_some() => return None,
            _ => {
                let v = feed.step(|c| json_value(c, 1))?;
                settings.push((tree::Key::Owned(key.clone()), v));
            }
        }
        seen.push(key);
    }
    // Nothing but white space after the object.
    feed.step(|c| loop {
        match c.b.get(c.i) {
            Some(b' ' | b'\n' | b'\r' | b'\t') => c.i += 1,
            Some(_) => return Err(Stop::GiveUp),
            None if c.end => return Ok(()),
            None => return Err(Stop::More),
        }
    })?;
    let model = model?;
    let controls = match controls {
        None => Vec::new(),
        Some(Value::Array(items)) => items,
        Some(_) => return None,
    };
    read::finish_model(model, controls)
}

/// The `nodes` or `links` array, element by element into the model (on two threads in a large
/// text: see [`add_parsed`]).
fn json_elements(feed: &mut impl Feed, model: &mut Model, nodes: bool) -> Option<()> {
    feed.step(|c| c.expect(b'['))?;
    let empty = feed.step(|c| {
        if c.json_space()? == b']' {
            c.i += 1;
            Ok(true)
        } else {
            Ok(false)
        }
    })?;
    if empty {
        return Some(());
    }
    let reading = Reading { units: model.units, headloss: model.options.headloss };
    // Links into a model without links yet: plain pipes are added without the link index, their
    // ids checked all different at once at the end (see `Adder::new_links`).
    let mut adder = Adder::new(model, nodes);
    add_parsed(feed, model, &mut adder, |feed, send| parse_elements(feed, &reading, nodes, send))
}

/// Runs `parse`, which parses elements and hands them over in batches through its `send` (which
/// gives back an empty batch to fill next), and adds the batches to the model with `adder`, then
/// checks what `adder` left to check ([`Adder::finish`]); gives what `parse` gave.
///
/// In a large text two threads share the work: this one parses the text into elements (the
/// commonest ones, a plain junction or a plain pipe, straight into the model's structs; any
/// other into a value tree), a helper adds them to the model in batches (the links' ends, the
/// model's checks; the ids of a run of plain elements are checked, and the node index made, at
/// once when the run ends: see [`Adder`]). At a million elements the parsing thread sets the
/// pace; the helper takes less time than it (two thirds of it in the nodes). Anything either
/// side gives up on stops both. A small text is read on this thread alone, the same way.
fn add_parsed<F: Feed, T>(
    feed: &mut F,
    model: &mut Model,
    adder: &mut Adder,
    parse: impl FnOnce(&mut F, &mut dyn FnMut(Vec<Parsed>) -> Option<Vec<Parsed>>) -> Option<T>,
) -> Option<T> {
    if !feed.large() {
        let parsed = parse(feed, &mut |mut batch| {
            adder.add(model, &mut batch)?;
            Some(batch)
        })?;
        adder.finish(model)?;
        return Some(parsed);
    }
    let (send, receive) = std::sync::mpsc::sync_channel::<Vec<Parsed>>(BATCHES_IN_FLIGHT);
    // Emptied batches go back to the parsing thread, which fills them again: no batch is
    // allocated on one thread and freed on the other, and their pages stay mapped.
    let (give_back, take_back) = std::sync::mpsc::channel::<Vec<Parsed>>();
    std::thread::scope(|scope| {
        let builder = scope.spawn(move || {
            receive.into_iter().try_for_each(|mut batch| {
                adder.add(model, &mut batch)?;
                // The parser may have stopped already: the batch is then dropped here.
                let _ = give_back.send(batch);
                Some(())
            })?;
            adder.finish(model)
        });
        let parsed = parse(feed, &mut |batch| {
            send.send(batch).ok()?;
            Some(take_back.try_recv().unwrap_or_else(|_| Vec::with_capacity(BATCH)))
        });
        drop(send);
        let built = builder.join().ok().flatten();
        built.and(parsed)
    })
}

/// Texts from this size on are read by two threads (see [`json_elements`]).
const TWO_THREADS_ABOVE: usize = 1 << 20;

/// Elements parsed per batch handed to the builder, and batches parsed ahead of it at most.
const BATCH: usize = 1024;
const BATCHES_IN_FLIGHT: usize = 4;

/// What the elements' values are read in.
struct Reading {
    units: crate::units::UnitSystem,
    headloss: HeadLossLaw,
}

/// An element as parsed, before it is added to the model.
enum Parsed {
    Node(Node),
    /// A plain pipe and the ids of its ends (the link's `from` and `to` are set on adding).
    Pipe(Link, crate::model::Id, crate::model::Id),
    /// Any other element, as its value tree.
    Value(Value),
}

/// Parses the array's elements (after `[`, up to and including `]`), sending them in batches;
/// `send` hands a batch over and gives an empty one to fill next. `None`: give up (the builder
/// learns it from the channel's closing early).
fn parse_elements(
    feed: &mut impl Feed,
    reading: &Reading,
    nodes: bool,
    send: &mut dyn FnMut(Vec<Parsed>) -> Option<Vec<Parsed>>,
) -> Option<()> {
    let mut batch = Vec::with_capacity(BATCH);
    let mut layout = Layout::default();
    loop {
        let direct = feed.step(|c| {
            let start = c.i;
            // Filled in place: the table of values is some 360 bytes, not worth a copy.
            let mut flat = FlatElement { values: [None; FLAT_KEYS.len() + 2] };
            if !flat_element(c, &mut flat, &mut layout)? {
                c.i = start;
                return Ok(None);
            }
            let element = if nodes {
                plain_junction(&flat, &reading.units).map(Parsed::Node)
            } else {
                plain_pipe(&flat, &reading.units, reading.headloss)
                    .map(|(link, from, to)| Parsed::Pipe(link, from.into(), to.into()))
            };
            let Some(element) = element else {
                c.i = start;
                return Ok(None);
            };
            // Pushed only once the step cannot be run again (after its last `More`).
            let more = after_element(c)?;
            batch.push(element);
            Ok(Some(more))
        })?;
        let more = match direct {
            Some(more) => more,
            None => feed.step(|c| {
                let value = json_value(c, 2)?;
                let more = after_element(c)?;
                batch.push(Parsed::Value(value));
                Ok(more)
            })?,
        };
        if batch.len() == BATCH || !more {
            batch = send(std::mem::take(&mut batch))?;
        }
        if !more {
            return Some(());
        }
    }
}

/// Adds parsed elements to the model, in order.
struct Adder {
    ends: Ends,
    /// The next element's position in its array.
    i: usize,
    nodes: bool,
    /// While every link so far is a plain pipe added to a model that had none: their ids, to
    /// be checked all different at once ([`NewIds`]) rather than each inserted into the link
    /// index as it comes (at a million links the index's probes miss the caches, and nothing
    /// of the reading looks a link up: `solve` frees the index after reading, and it is made
    /// again at the first lookup). The first link of another kind ends it: the ids so far are
    /// checked, and from there on links are added with the index.
    new_links: Option<NewIds>,
    /// While every node so far is a plain junction added to a model that had none: they are
    /// added without the node index, which is made at once when they end
    /// (`Model::index_new_nodes`, in the order of its buckets), the ids checked all different
    /// as it is made. At a million nodes the inserts one by one, each at a random place of a
    /// table larger than the caches, and the table's growth took about half of the time of the
    /// thread that adds them (which set the pace of the nodes' reading). The first node of
    /// another kind ends it, as for the links.
    new_nodes: bool,
}

impl Adder {
    /// The adder of the `nodes` (or `links`) array into `model`: nodes (links) into a model
    /// without any yet are added without the node (link) index ([`Adder::new_nodes`],
    /// [`Adder::new_links`]).
    fn new(model: &Model, nodes: bool) -> Adder {
        let new_links = (!nodes && model.links().is_empty()).then(NewIds::default);
        let new_nodes = nodes && model.nodes().is_empty();
        Adder { ends: Ends::default(), i: 0, nodes, new_links, new_nodes }
    }

    /// Adds a batch, leaving it empty; `None`: give up (an element the model refuses, or a link
    /// end that is no node: the whole-text reader then says which).
    fn add(&mut self, model: &mut Model, batch: &mut Vec<Parsed>) -> Option<()> {
        for element in batch.drain(..) {
            match element {
                Parsed::Node(node) if self.new_nodes => model.add_node_with_new_id(node).ok().map(drop)?,
                Parsed::Node(node) => model.add_node(node).ok().map(drop)?,
                Parsed::Pipe(mut link, from, to) => {
                    link.from = self.ends.from(model, &from)?;
                    link.to = self.ends.to(model, &to, link.from)?;
                    match &mut self.new_links {
                        Some(new) => {
                            let k = model.add_link_with_new_id(link).ok()?;
                            new.push(&model.links()[k].id, k);
                        }
                        None => model.add_link(link).ok().map(drop)?,
                    }
                }
                Parsed::Value(value) if self.nodes => {
                    self.finish(model)?;
                    read::add_node_value(model, self.i, value).ok()?;
                }
                Parsed::Value(value) => {
                    self.finish(model)?;
                    read::add_link_value(model, self.i, value).ok()?;
                }
            }
            self.i += 1;
        }
        Some(())
    }

    /// Checks that the nodes or links added without the index have ids all different, making
    /// the node index (`None`: some do not; the whole-text reader then says which).
    fn finish(&mut self, model: &mut Model) -> Option<()> {
        if std::mem::take(&mut self.new_nodes) && !model.index_new_nodes() {
            return None;
        }
        match self.new_links.take() {
            Some(new) => new.all_different(|k| &model.links()[k].id).then_some(()),
            None => Some(()),
        }
    }
}

/// What follows an element of an array: `,` (more follow, `true`) or `]`.
fn after_element(c: &mut Cursor) -> Step<bool> {
    match c.json_space()? {
        b',' => {
            c.i += 1;
            Ok(true)
        }
        b']' => {
            c.i += 1;
            Ok(false)
        }
        _ => Err(Stop::GiveUp),
    }
}

/// A value of a flat element: a string, a number or a boolean.
#[derive(Clone, Copy)]
enum Flat<'a> {
    Str(&'a str),
    Num(f64),
    Bool(bool),
}

/// The keys a plain junction or pipe may have, by position in [`FlatElement::values`].
const FLAT_KEYS: [&str; 13] = [
    "id",
    "kind",
    "elevation",
    "demand",
    "x",
    "y",
    "zone",
    "from",
    "to",
    "length",
    "diameter",
    "roughness",
    "minor_loss",
];
const STATUS: usize = FLAT_KEYS.len();
const CHECK_VALVE: usize = FLAT_KEYS.len() + 1;

/// An element table whose keys are among [`FLAT_KEYS`], `status` and `check_valve`, each once,
/// with plain values.
struct FlatElement<'a> {
    values: [Option<Flat<'a>>; FLAT_KEYS.len() + 2],
}

impl<'a> FlatElement<'a> {
    fn str(&self, k: usize) -> Option<Option<&'a str>> {
        match self.values[k] {
            None => Some(None),
            Some(Flat::Str(s)) => Some(Some(s)),
            Some(_) => None,
        }
    }

    /// A number within the readers' magnitude bounds (others are the model reader's to refuse).
    fn num(&self, k: usize) -> Option<Option<f64>> {
        match self.values[k] {
            None => Some(None),
            Some(Flat::Num(v)) => {
                let size = v.abs();
                let fine = size <= crate::model::LARGEST_INPUT && (size == 0.0 || size >= crate::model::SMALLEST_INPUT);
                fine.then_some(Some(v))
            }
            Some(_) => None,
        }
    }
}

/// The position of a flat key in [`FlatElement::values`].
fn flat_key(key: &str) -> Option<usize> {
    Some(match key {
        "id" => 0,
        "kind" => 1,
        "elevation" => 2,
        "demand" => 3,
        "x" => 4,
        "y" => 5,
        "zone" => 6,
        "from" => 7,
        "to" => 8,
        "length" => 9,
        "diameter" => 10,
        "roughness" => 11,
        "minor_loss" => 12,
        "status" => STATUS,
        "check_valve" => CHECK_VALVE,
        _ => return None,
    })
}

/// The layout of the last flat element read: for each of its keys in order, the key's position
/// in [`FlatElement::values`] and the exact bytes from the end of the value before it (or from
/// where the element's reading began) to the start of its value, such as `, "elevation": `.
///
/// Elements of a written model repeat one layout, so the next element's keys are predicted:
/// where the text at the cursor is byte for byte the recorded stretch, the key is the recorded
/// one (the stretch holds its quoted name, and its punctuation is what the general path would
/// have read), and its value is read at once; anywhere else the general path reads the key and
/// records the new layout from there on. A prediction never decides anything the text does not
/// say, so a layout left by a step that stopped half-way (more bytes to read, or not a flat
/// element) is still a right one.
#[derive(Default)]
struct Layout {
    /// Per key: its position in `values`, and the end of its stretch in `text`.
    keys: Vec<(usize, usize)>,
    /// The stretches, one after the other.
    text: Vec<u8>,
}

impl Layout {
    /// The key at `p` if the bytes at the cursor are its recorded stretch; moves past them.
    #[inline]
    fn predicted(&self, p: usize, c: &mut Cursor) -> Option<usize> {
        let &(k, end) = self.keys.get(p)?;
        let from = if p == 0 { 0 } else { self.keys[p - 1].1 };
        let stretch = &self.text[from..end];
        if same_start(&c.b[c.i..], stretch) {
            c.i += stretch.len();
            Some(k)
        } else {
            None
        }
    }

    /// Keeps the first `p` keys only.
    fn truncate(&mut self, p: usize) {
        self.keys.truncate(p);
        self.text.truncate(self.keys.last().map_or(0, |&(_, end)| end));
    }

    /// Records key `k` at `p` (the keys before it kept) with its stretch.
    fn record(&mut self, p: usize, k: usize, stretch: &[u8]) {
        self.truncate(p);
        self.text.extend_from_slice(stretch);
        self.keys.push((k, self.text.len()));
    }
}

/// Whether `text` starts with `stretch`: `text.starts_with(stretch)` compared a word at a time
/// in place ([`same_bytes`]). A layout's stretches are short (`, "elevation": ` is 15 bytes), and
/// the library's `memcmp` behind `starts_with` is a call per key that a profile of the 1e6
/// reading put at a ninth of the parsing thread's time.
#[inline]
fn same_start(text: &[u8], stretch: &[u8]) -> bool {
    text.get(..stretch.len()).is_some_and(|t| same_bytes(t, stretch))
}

/// The high bit of each byte of `w` (eight bytes, the first the lowest) that ends a plain string's run: a quote, a
/// backslash, a control character (below 0x20) or a byte of a multi-byte character (0x80 and
/// above). The lowest flag is always right; flags above a right one may be false (a borrow
/// runs on from a flagged byte), so only the lowest is read.
#[inline]
fn special_bytes(w: u64) -> u64 {
    const ONES: u64 = 0x0101_0101_0101_0101;
    const HIGH: u64 = 0x8080_8080_8080_8080;
    let zero = |x: u64| x.wrapping_sub(ONES) & !x;
    let control = w.wrapping_sub(ONES * 0x20) & !w;
    (control | zero(w ^ (ONES * u64::from(b'"'))) | zero(w ^ (ONES * u64::from(b'\\'))) | w) & HIGH
}

/// Reads an element table with only flat keys into `e`, whose values are all `None` at the
/// start (`false`, cursor anywhere: not such an element). `layout` is the last element's (see
/// [`Layout`]); it becomes this one's.
fn flat_element<'a>(c: &mut Cursor<'a>, e: &mut FlatElement<'a>, layout: &mut Layout) -> Step<bool> {
    let mut p = 0;
    loop {
        let from = c.i;
        let k = match layout.predicted(p, c) {
            Some(k) => k,
            None => {
                let t = c.json_space()?;
                if p == 0 {
                    if t != b'{' {
                        return Ok(false);
                    }
                    c.i += 1;
                    if c.json_space()? == b'}' {
                        return Ok(false);
                    }
                } else {
                    match t {
                        b',' => c.i += 1,
                        b'}' => {
                            c.i += 1;
                            layout.truncate(p);
                            return Ok(true);
                        }
                        _ => return Err(Stop::GiveUp),
                    }
                }
                if c.json_space()? != b'"' {
                    return Ok(false);
                }
                let key = c.plain_string()?;
                let Some(k) = flat_key(key) else { return Ok(false) };
                c.expect(b':')?;
                c.json_space()?;
                layout.record(p, k, &c.b[from..c.i]);
                k
            }
        };
        if e.values[k].is_some() {
            return Ok(false);
        }
        let v = match c.json_space()? {
            b'"' => Flat::Str(c.plain_string()?),
            b't' => {
                word(c, b"true", Value::Bool(true))?;
                Flat::Bool(true)
            }
            b'f' => {
                word(c, b"false", Value::Bool(false))?;
                Flat::Bool(false)
            }
            b'-' | b'0'..=b'9' => Flat::Num(c.flat_number()?),
            _ => return Ok(false),
        };
        e.values[k] = Some(v);
        p += 1;
        // The commonest end: the last recorded key's value closes the element.
        if p == layout.keys.len() && c.b.get(c.i) == Some(&b'}') {
            c.i += 1;
            return Ok(true);
        }
    }
}

/// A junction with an id, an elevation and optionally a demand, coordinates and a zone: the
/// node the model reader would build (`None`: not plain; the model reader decides).
fn plain_junction(e: &FlatElement, units: &crate::units::UnitSystem) -> Option<Node> {
    const NODE_ONLY: [usize; 6] = [0, 1, 2, 3, 4, 5];
    if e.values.iter().enumerate().any(|(k, v)| v.is_some() && !NODE_ONLY.contains(&k) && k != 6) {
        return None;
    }
    let id = e.str(0)??;
    if !plain_id(id) || !matches!(e.str(1)?, None | Some("junction")) {
        return None;
    }
    let elevation = e.num(2)??;
    let demand = e.num(3)?.unwrap_or(0.0);
    let coordinates = match (e.num(4)?, e.num(5)?) {
        (Some(x), Some(y)) => Some((x, y)),
        (None, None) => None,
        _ => return None,
    };
    let zone = e.str(6)?.map(str::to_owned);
    Some(Node {
        id: id.into(),
        elevation: units.length.to_si(elevation),
        coordinates,
        zone,
        kind: NodeKind::Junction { demand: units.flow.to_si(demand) },
    })
}

/// Where the last links' ends were, to find the next ends without the id index.
///
/// Files list links near the nodes just named: a link usually starts at the node the last one
/// started at or the one after it, or where the last one ended, and ends at the node after its
/// start, or as far from its start as one of the last two links' ends were from theirs (a
/// street grid's next block, a main's next branch), or at the node after the last end (a branch
/// from afar joining the next node listed: with it, a generated network's ends are found by
/// guess for 88 % of the starts and nearly every end, against 81 % and 88 % without). Checking
/// those few nodes' ids (in memory just touched) spares most
/// lookups in the id index, whose probes at a million nodes miss the caches. A guess is taken
/// only when the node's id is the one asked for, so the answer is the index's answer (ids are
/// unique).
#[derive(Default)]
struct Ends {
    from: usize,
    /// The last link's end.
    to: usize,
    /// The last two links' `to − from`, in node positions.
    offsets: [isize; 2],
}

impl Ends {
    #[inline]
    fn guess(model: &Model, id: &str, candidates: [usize; 4]) -> Option<usize> {
        let nodes = model.nodes();
        candidates.into_iter().find(|&k| nodes.get(k).is_some_and(|n| same_bytes(n.id.as_bytes(), id.as_bytes())))
    }

    /// A start: at or just after the last start, or at the last end (a street that goes on
    /// from where the last link ended).
    fn from(&mut self, model: &Model, id: &str) -> Option<usize> {
        let f = self.from;
        let k = Self::guess(model, id, [f, f + 1, f + 2, self.to]).or_else(|| model.node_index(id))?;
        self.from = k;
        Some(k)
    }

    /// An end: as far from its start as the last ends were, or just after the last end (a
    /// branch from afar that joins the next node of the list).
    fn to(&mut self, model: &Model, id: &str, from: usize) -> Option<usize> {
        let [a, b] = self.offsets;
        let candidates =
            [from.wrapping_add(1), from.wrapping_add_signed(a), from.wrapping_add_signed(b), self.to.wrapping_add(1)];
        let k = Self::guess(model, id, candidates).or_else(|| model.node_index(id))?;
        self.to = k;
        let offset = (k as isize).wrapping_sub(from as isize);
        if offset != a {
            self.offsets = [offset, a];
        }
        Some(k)
    }
}

/// A pipe with an id, its ends, length, diameter and roughness, and optionally a minor loss, a
/// status and a check valve: the link the model reader would build, but for its ends, and the
/// ids of its ends (`None`: not plain).
fn plain_pipe<'a>(
    e: &FlatElement<'a>,
    units: &crate::units::UnitSystem,
    headloss: HeadLossLaw,
) -> Option<(Link, &'a str, &'a str)> {
    const PIPE_KEYS: [usize; 9] = [0, 1, 7, 8, 9, 10, 11, 12, STATUS];
    if e.values.iter().enumerate().any(|(k, v)| v.is_some() && !PIPE_KEYS.contains(&k) && k != CHECK_VALVE) {
        return None;
    }
    let id = e.str(0)??;
    if !plain_id(id) || !matches!(e.str(1)?, None | Some("pipe")) {
        return None;
    }
    let (from, to) = (e.str(7)??, e.str(8)??);
    let status = match e.str(STATUS)? {
        None | Some("open") => LinkStatus::Open,
        Some("closed") => LinkStatus::Closed,
        Some(_) => return None,
    };
    let check_valve = match e.values[CHECK_VALVE] {
        None => false,
        Some(Flat::Bool(b)) => b,
        Some(_) => return None,
    };
    let roughness = e.num(11)??;
    let pipe = Pipe {
        length: units.length.to_si(e.num(9)??),
        diameter: units.diameter.to_si(e.num(10)??),
        roughness: match headloss {
            HeadLossLaw::HazenWilliams => roughness,
            HeadLossLaw::DarcyWeisbach => units.roughness.to_si(roughness),
        },
        minor_loss: e.num(12)?.unwrap_or(0.0),
        check_valve,
    };
    // The ends are set when the link is added (`from` and `to` are the ids' positions).
    Some((Link { id: id.into(), from: 0, to: 0, status, kind: LinkKind::Pipe(pipe) }, from, to))
}

// ---------------------------------------------------------------------------------------------
// TOML

/// TOML white space within a line: space and tab.
fn toml_blank(c: &mut Cursor) {
    while matches!(c.b.get(c.i), Some(b' ' | b'\t')) {
        c.i += 1;
    }
}

/// The end of a line after a value: blanks, an optional comment, then a line break or the end of
/// the text.
fn toml_line_end(c: &mut Cursor) -> Step<()> {
    toml_blank(c);
    if c.b.get(c.i) == Some(&b'#') {
        toml_comment(c)?;
    }
    match c.b.get(c.i) {
        Some(b'\n') => {
            c.i += 1;
            Ok(())
        }
        Some(b'\r') => match c.b.get(c.i + 1) {
            Some(b'\n') => {
                c.i += 2;
                Ok(())
            }
            Some(_) => Err(Stop::GiveUp),
            None => Err(c.out()),
        },
        Some(_) => Err(Stop::GiveUp),
        None if c.end => Ok(()),
        None => Err(Stop::More),
    }
}

/// A comment (at `#`) up to the line break: text without control characters but tab.
fn toml_comment(c: &mut Cursor) -> Step<()> {
    let start = c.i;
    let mut ascii = true;
    loop {
        match c.b.get(c.i) {
            Some(b'\n' | b'\r') => break,
            Some(&b) if (b < 0x20 && b != b'\t') || b == 0x7f => return Err(Stop::GiveUp),
            Some(&b) => {
                ascii &= b < 0x80;
                c.i += 1;
            }
            None if c.end => break,
            None => return Err(Stop::More),
        }
    }
    if !ascii && std::str::from_utf8(&c.b[start..c.i]).is_err() {
        return Err(Stop::GiveUp);
    }
    Ok(())
}

/// Blank lines and comment lines, up to the first character of the next line with content;
/// `None` at the end of the text.
fn toml_next_line(c: &mut Cursor) -> Step<Option<u8>> {
    loop {
        toml_blank(c);
        match c.b.get(c.i) {
            Some(b'#') => toml_comment(c)?,
            Some(b'\n') => c.i += 1,
            Some(b'\r') => match c.b.get(c.i + 1) {
                Some(b'\n') => c.i += 2,
                Some(_) => return Err(Stop::GiveUp),
                None => return Err(c.out()),
            },
            Some(&b) => return Ok(Some(b)),
            None if c.end => return Ok(None),
            None => return Err(Stop::More),
        }
    }
}

/// A bare key (letters, digits, `_`, `-`); quoted and dotted keys are the other reader's.
fn toml_key<'a>(c: &mut Cursor<'a>) -> Step<&'a str> {
    let start = c.i;
    while let Some(&b) = c.b.get(c.i) {
        if b.is_ascii_alphanumeric() || b == b'_' || b == b'-' {
            c.i += 1;
        } else {
            break;
        }
    }
    if c.i == c.b.len() && !c.end {
        return Err(Stop::More);
    }
    if c.i == start {
        return Err(Stop::GiveUp);
    }
    // SAFETY: ASCII only.
    Ok(unsafe { std::str::from_utf8_unchecked(&c.b[start..c.i]) })
}

/// `key =` of a key/value line; the key.
fn toml_key_eq<'a>(c: &mut Cursor<'a>) -> Step<&'a str> {
    let key = toml_key(c)?;
    toml_blank(c);
    match c.b.get(c.i) {
        Some(b'=') => c.i += 1,
        Some(_) => return Err(Stop::GiveUp),
        None => return Err(c.out()),
    }
    toml_blank(c);
    Ok(key)
}

/// Checks that a value ends where TOML lets it end (more digits may still be unread).
fn toml_after_value(c: &Cursor) -> Step<()> {
    match c.b.get(c.i) {
        Some(b' ' | b'\t' | b'\r' | b'\n' | b'#' | b',' | b']' | b'}') => Ok(()),
        Some(_) => Err(Stop::GiveUp),
        None if c.end => Ok(()),
        None => Err(Stop::More),
    }
}

/// A basic string (at `"`) without escapes; TOML refuses DEL in it, JSON does not.
fn toml_basic<'a>(c: &mut Cursor<'a>) -> Step<&'a str> {
    let s = c.plain_string()?;
    if s.as_bytes().contains(&0x7f) {
        return Err(Stop::GiveUp);
    }
    Ok(s)
}

/// A literal string (at `'`): no escapes, no control characters but tab.
fn toml_literal<'a>(c: &mut Cursor<'a>) -> Step<&'a str> {
    let start = c.i + 1;
    let mut j = start;
    loop {
        match c.b.get(j) {
            Some(b'\'') => break,
            Some(&b) if (b < 0x20 && b != b'\t') || b == 0x7f => return Err(Stop::GiveUp),
            Some(_) => j += 1,
            None => return Err(c.out()),
        }
    }
    c.i = j + 1;
    std::str::from_utf8(&c.b[start..j]).map_err(|_| Stop::GiveUp)
}

/// A number: the JSON grammar, which TOML's decimal numbers share, without `+`, underscores,
/// `inf`, `nan`, hexadecimal or dates (the other reader's).
fn toml_number(c: &mut Cursor) -> Step<Value> {
    let v = c.json_number()?;
    toml_after_value(c)?;
    Ok(v)
}

/// A TOML value into the same tree the `toml` crate gives through [`tree::Seed`].
fn toml_value(c: &mut Cursor, depth: usize) -> Step<Value> {
    if depth >= MAX_DEPTH {
        return Err(Stop::GiveUp);
    }
    let b = match c.b.get(c.i) {
        Some(&b) => b,
        None => return Err(c.out()),
    };
    let v = match b {
        b'"' => {
            // (`"""`: a multi-line string, left to the other reader by the check after it.)
            let s = toml_basic(c)?.to_owned();
            toml_after_value(c)?;
            Value::Str(s)
        }
        b'\'' => {
            let s = toml_literal(c)?.to_owned();
            toml_after_value(c)?;
            Value::Str(s)
        }
        b't' => {
            word(c, b"true", Value::Bool(true))?;
            toml_after_value(c)?;
            Value::Bool(true)
        }
        b'f' => {
            word(c, b"false", Value::Bool(false))?;
            toml_after_value(c)?;
            Value::Bool(false)
        }
        b'-' | b'0'..=b'9' => toml_number(c)?,
        b'[' => {
            c.i += 1;
            let mut items = Vec::new();
            loop {
                // Line breaks and comments may come between the items of an array.
                match toml_next_line(c)? {
                    Some(b']') => {
                        c.i += 1;
                        break;
                    }
                    Some(_) => {}
                    None => return Err(Stop::GiveUp),
                }
                items.push(toml_value(c, depth + 1)?);
                match toml_next_line(c)? {
                    Some(b',') => c.i += 1,
                    Some(b']') => {
                        c.i += 1;
                        break;
                    }
                    _ => return Err(Stop::GiveUp),
                }
            }
            Value::Array(items)
        }
        b'{' => {
            // An inline table: one line, no trailing comma.
            c.i += 1;
            let mut entries: Vec<(tree::Key, Value)> = Vec::with_capacity(TABLE_CAPACITY);
            toml_blank(c);
            if c.b.get(c.i) == Some(&b'}') {
                c.i += 1;
            } else {
                loop {
                    toml_blank(c);
                    let key = toml_key_eq(c)?;
                    if entries.iter().any(|(k, _)| k == key) || entries.len() > 64 {
                        return Err(Stop::GiveUp);
                    }
                    let key = tree::key(key);
                    let value = toml_value(c, depth + 1)?;
                    entries.push((key, value));
                    toml_blank(c);
                    match c.b.get(c.i) {
                        Some(b',') => c.i += 1,
                        Some(b'}') => {
                            c.i += 1;
                            break;
                        }
                        Some(_) => return Err(Stop::GiveUp),
                        None => return Err(c.out()),
                    }
                }
            }
            Value::Table(entries)
        }
        _ => return Err(Stop::GiveUp),
    };
    Ok(v)
}

/// The key/value lines of a table, up to the next header or the end of the text.
fn toml_body(c: &mut Cursor, depth: usize) -> Step<Vec<(tree::Key, Value)>> {
    let mut entries: Vec<(tree::Key, Value)> = Vec::with_capacity(TABLE_CAPACITY);
    loop {
        match toml_next_line(c)? {
            None | Some(b'[') => return Ok(entries),
            Some(_) => {}
        }
        let key = toml_key_eq(c)?;
        if entries.iter().any(|(k, _)| k == key) || key.starts_with('$') {
            return Err(Stop::GiveUp);
        }
        let key = tree::key(key);
        let value = toml_value(c, depth + 1)?;
        toml_line_end(c)?;
        entries.push((key, value));
    }
}

/// The key/value lines of an element with only flat keys and values (`None`: not such an
/// element; the cursor is then anywhere).
fn toml_flat_body<'a>(c: &mut Cursor<'a>) -> Step<Option<FlatElement<'a>>> {
    let mut e = FlatElement { values: [None; FLAT_KEYS.len() + 2] };
    let mut any = false;
    loop {
        match toml_next_line(c)? {
            None | Some(b'[') => return Ok(any.then_some(e)),
            Some(_) => {}
        }
        let key = toml_key_eq(c)?;
        let Some(k) = flat_key(key) else { return Ok(None) };
        if e.values[k].is_some() {
            return Ok(None);
        }
        let v = match c.b.get(c.i) {
            Some(b'"') => Flat::Str(toml_basic(c)?),
            Some(b't') => {
                word(c, b"true", Value::Bool(true))?;
                Flat::Bool(true)
            }
            Some(b'f') => {
                word(c, b"false", Value::Bool(false))?;
                Flat::Bool(false)
            }
            // The same values as the general reader's (`flat_number` is tested against it).
            Some(b'-' | b'0'..=b'9') => Flat::Num(c.flat_number()?),
            Some(_) => return Ok(None),
            None => return Err(c.out()),
        };
        toml_after_value(c)?;
        toml_line_end(c)?;
        e.values[k] = Some(v);
        any = true;
    }
}

/// A table header at `[`: the name and whether it is an array of tables (`[[name]]`). Dotted
/// and quoted names are the other reader's.
fn toml_header<'a>(c: &mut Cursor<'a>) -> Step<(&'a str, bool)> {
    c.i += 1;
    let array = match c.b.get(c.i) {
        Some(b'[') => {
            c.i += 1;
            true
        }
        Some(_) => false,
        None => return Err(c.out()),
    };
    toml_blank(c);
    let name = toml_key(c)?;
    toml_blank(c);
    let close: &[u8] = if array { b"]]" } else { b"]" };
    let have = &c.b[c.i..];
    if have.len() < close.len() && !c.end {
        return Err(Stop::More);
    }
    if !have.starts_with(close) {
        return Err(Stop::GiveUp);
    }
    c.i += close.len();
    toml_line_end(c)?;
    Ok((name, array))
}

/// What follows an element of an array of tables.
enum NextHeader {
    /// Another element of the same array.
    Same,
    /// Another table's header: its name and whether it is an array of tables.
    Other(String, bool),
    /// The end of the text.
    End,
}

/// The header after a table's body (at the start of a line or at the end of the text), against
/// the array of tables `name` being read.
fn toml_next_header(c: &mut Cursor, name: &str) -> Step<NextHeader> {
    match toml_next_line(c)? {
        None => Ok(NextHeader::End),
        Some(b'[') => {
            let (n, array) = toml_header(c)?;
            Ok(if array && n == name { NextHeader::Same } else { NextHeader::Other(n.to_owned(), array) })
        }
        Some(_) => Err(Stop::GiveUp),
    }
}

/// Parses the elements of the array of tables `[[nodes]]` (or `[[links]]`) that follow one
/// another, from the body after the first header, sending them in batches as [`parse_elements`]
/// does; gives the header that ends them (`None`: the end of the text).
fn toml_parse_elements(
    feed: &mut impl Feed,
    reading: &Reading,
    nodes: bool,
    send: &mut dyn FnMut(Vec<Parsed>) -> Option<Vec<Parsed>>,
) -> Option<Option<(String, bool)>> {
    let name = if nodes { "nodes" } else { "links" };
    let mut batch = Vec::with_capacity(BATCH);
    loop {
        let direct = feed.step(|c| {
            let start = c.i;
            let element = match toml_flat_body(c)? {
                Some(flat) if nodes => plain_junction(&flat, &reading.units).map(Parsed::Node),
                Some(flat) => plain_pipe(&flat, &reading.units, reading.headloss)
                    .map(|(link, from, to)| Parsed::Pipe(link, from.into(), to.into())),
                None => None,
            };
            if element.is_none() {
                c.i = start;
            }
            Ok(element)
        })?;
        let element = match direct {
            Some(element) => element,
            None => Parsed::Value(Value::Table(feed.step(|c| toml_body(c, 2))?)),
        };
        batch.push(element);
        let next = feed.step(|c| toml_next_header(c, name))?;
        let more = matches!(next, NextHeader::Same);
        if batch.len() == BATCH || !more {
            batch = send(std::mem::take(&mut batch))?;
        }
        match next {
            NextHeader::Same => {}
            NextHeader::Other(name, array) => return Some(Some((name, array))),
            NextHeader::End => return Some(None),
        }
    }
}

/// The elements of `[[nodes]]` (or `[[links]]`) that follow one another, from the body after the
/// first header, into the model with `adder` (on two threads in a large text: see
/// [`add_parsed`]); gives the header that ends them (`None`: the end of the text).
fn toml_elements(
    feed: &mut impl Feed,
    model: &mut Model,
    nodes: bool,
    adder: &mut Adder,
) -> Option<Option<(String, bool)>> {
    let reading = Reading { units: model.units, headloss: model.options.headloss };
    add_parsed(feed, model, adder, |feed, send| toml_parse_elements(feed, &reading, nodes, send))
}

/// Reads a TOML model from a text in memory in one pass; `None`: give up (see the module docs).
pub(crate) fn toml_from_slice(text: &[u8]) -> Option<Model> {
    let text = text.strip_prefix("\u{feff}".as_bytes()).unwrap_or(text);
    toml_model(&mut SliceFeed { b: text, i: 0 })
}

/// Reads a TOML model from `src` in one pass, a chunk at a time (memory holds the model and a
/// chunk); gives up beyond `limit` bytes. `None`: give up (see the module docs).
pub fn toml_from_reader<R: Read>(src: R, limit: u64) -> Option<Model> {
    toml_from_chunks(src, limit, CHUNK)
}

fn toml_from_chunks<R: Read>(src: R, limit: u64, chunk: usize) -> Option<Model> {
    let mut feed = ReadFeed::new(src, limit, chunk);
    feed.step(|c| {
        if c.b.len() - c.i < 3 && !c.end {
            return Err(Stop::More);
        }
        if c.b[c.i..].starts_with("\u{feff}".as_bytes()) {
            c.i += 3;
        }
        Ok(())
    })?;
    toml_model(&mut feed)
}

/// The file: top-level keys, setting tables and arrays of tables, then `[[nodes]]`, then
/// `[[links]]` (and `[[controls]]` anywhere); any other order gives up.
fn toml_model(feed: &mut impl Feed) -> Option<Model> {
    // Top-level keys and setting tables, by name; arrays of tables gather their entries.
    let mut settings: Vec<(tree::Key, Value)> = feed.step(|c| toml_body(c, 0))?;
    let mut arrays: Vec<(String, Vec<Value>)> = Vec::new();
    let mut controls: Vec<Value> = Vec::new();
    let mut model: Option<Model> = None;
    let mut section = 0; // 0 settings, 1 nodes, 2 links
                         // The adders of the two arrays, kept from one run of their elements to the next (a
                         // `[[controls]]` between them ends a run).
    let (mut node_adder, mut link_adder): (Option<Adder>, Option<Adder>) = (None, None);
    // The header that ended a run of elements, to be taken next.
    let mut pending: Option<(String, bool)> = None;
    loop {
        let header = match pending.take() {
            Some(header) => Some(header),
            None => feed.step(|c| match toml_next_line(c)? {
                None => Ok(None),
                Some(b'[') => Ok(Some(toml_header(c).map(|(n, a)| (n.to_owned(), a))?)),
                Some(_) => Err(Stop::GiveUp),
            })?,
        };
        let Some((name, array)) = header else { break };
        match (name.as_str(), array) {
            ("controls", true) => controls.push(Value::Table(feed.step(|c| toml_body(c, 1))?)),
            ("nodes", true) | ("links", true) => {
                let want = if name == "nodes" { 1 } else { 2 };
                if section > want || (want == 2 && section == 0) {
                    return None;
                }
                if section == 0 {
                    // The settings are complete: the model starts. (Elements written as keys of
                    // the top level, `nodes = [...]`, are the other reader's.)
                    if settings.iter().any(|(k, _)| matches!(k.as_ref(), "nodes" | "links" | "controls")) {
                        return None;
                    }
                    for (k, items) in arrays.drain(..) {
                        if settings.iter().any(|(s, _)| *s == k) {
                            return None;
                        }
                        settings.push((tree::Key::Owned(k), Value::Array(items)));
                    }
                    let mut top = read::top_fields(std::mem::take(&mut settings));
                    model = Some(read::settings_model(&mut top)?);
                }
                section = want;
                let m = model.as_mut()?;
                let is_nodes = want == 1;
                let adder = if is_nodes { &mut node_adder } else { &mut link_adder };
                let adder = adder.get_or_insert_with(|| Adder::new(m, is_nodes));
                pending = toml_elements(feed, m, is_nodes, adder)?;
            }
            _ if section > 0 => return None,
            (_, true) => {
                if settings.iter().any(|(k, _)| *k == name) {
                    return None;
                }
                let entry = Value::Table(feed.step(|c| toml_body(c, 1))?);
                match arrays.iter_mut().find(|(k, _)| *k == name) {
                    Some((_, items)) => items.push(entry),
                    None => arrays.push((name, vec![entry])),
                }
            }
            (_, false) => {
                if settings.iter().any(|(k, _)| *k == name) || arrays.iter().any(|(k, _)| *k == name) {
                    return None;
                }
                let entries = feed.step(|c| toml_body(c, 1))?;
                settings.push((tree::Key::Owned(name), Value::Table(entries)));
            }
        }
    }
    read::finish_model(model?, controls)
}

#[cfg(test)]
mod tests {
    use super::super::read::read_tree;
    use super::super::read_str;
    use super::super::write;
    use super::super::Format;
    use super::*;

    /// Models of every shape the repository has: the demo models (patterns, controls, tanks,
    /// pumps, valves, quality, fittings...), the published test networks, generated networks in
    /// other units and laws.
    fn models() -> Vec<Model> {
        let root = concat!(env!("CARGO_MANIFEST_DIR"), "/..");
        let mut models = Vec::new();
        for dir in ["examples", "tests/data"] {
            let mut files: Vec<_> =
                std::fs::read_dir(format!("{root}/{dir}")).unwrap().flatten().map(|e| e.path()).collect();
            files.sort();
            for path in files.iter().filter(|p| p.extension().is_some_and(|e| e == "toml")) {
                let text = std::fs::read_to_string(path).unwrap();
                if let Ok(m) = read_str(&text, Format::Toml, "model") {
                    models.push(m);
                }
            }
        }
        assert!(models.len() >= 6, "the demo models were found");
        let mut g = crate::generate::generate(&crate::generate::NetworkSpec::new(1_200, 11)).unwrap();
        models.push(g.clone());
        use crate::units::{DiameterUnit, FlowUnit, LengthUnit};
        g.units.flow = FlowUnit::parse("gpm").unwrap();
        g.units.length = LengthUnit::parse("ft").unwrap();
        g.units.diameter = DiameterUnit::parse("in").unwrap();
        models.push(g);
        models
    }

    /// Edits of a generated model's text that the model refuses, each with what it is; `key(k)`
    /// is how the text writes key `k` before its value (`"k": ` or `k = `).
    fn refused_edits(text: &str, key: impl Fn(&str) -> String) -> Vec<(String, &'static str)> {
        let to = format!("{}\"J", key("to"));
        let last_pipe = text.rfind(&to).unwrap();
        let (id, length) = (key("id"), key("length"));
        vec![
            (text.replacen(&format!("{to}17\""), &format!("{to}999999\""), 1), "an end that is no node"),
            (format!("{}{to}x{}", &text[..last_pipe], &text[last_pipe + to.len()..]), "the last link's end"),
            (text.replacen(&format!("{id}\"J12\""), &format!("{id}\"J11\""), 1), "a duplicate node id"),
            (text.replacen(&format!("{id}\"P40\""), &format!("{id}\"P39\""), 1), "a duplicate link id"),
            (text.replacen(&length, &format!("{length}-"), 1), "a negative length"),
        ]
    }

    /// Edits that repeat a node's id while every link still finds its ends (a copy of a whole
    /// element added, so that the only fault is the repeat), for every place the two readers
    /// check ids: within the junctions added without the index (neighbours, far apart, first
    /// and last), a junction repeated just before the first node of another kind (where the
    /// index is made), and a node of another kind repeated after it (added with the index).
    /// `element(id)` is where the text's element with that id starts; an element runs to the
    /// next one.
    fn repeated_node_ids(text: &str, element: impl Fn(&str) -> String) -> Vec<(String, &'static str)> {
        let at = |id: &str| text.find(&element(id)).unwrap_or_else(|| panic!("{id} is in the text"));
        let whole = |id: &str| {
            let start = at(id);
            let len = text[start + 1..].find(&element("")[..element("").len() - 1]).unwrap() + 1;
            text[start..start + len].to_owned()
        };
        let copy_before = |id: &str, before: &str| {
            let b = at(before);
            format!("{}{}{}", &text[..b], whole(id), &text[b..])
        };
        let first_other = text.find(&element("R1")).unwrap();
        let last_junction = &text[..first_other];
        let last_id_start = last_junction.rfind(&element("J")).unwrap() + element("J").len() - 1;
        let last_id = &text[last_id_start..last_id_start + text[last_id_start..].find('"').unwrap()];
        assert!(last_id.starts_with('J'), "{last_id}");
        vec![
            (copy_before("J11", "J12"), "a junction's id repeated by the next element"),
            (copy_before("J11", "J3000"), "a junction's id repeated far after it"),
            (copy_before("J1", last_id), "the first junction's id repeated at the last"),
            (copy_before("J11", "R1"), "a junction's id repeated just before the first reservoir"),
            (copy_before("R1", "T1"), "a reservoir's id repeated after it"),
        ]
    }

    /// A text large enough to be read by two threads builds the model the tree reader builds,
    /// and anything the model refuses in it (a link's end that is no node, a duplicate id, a
    /// bad value) makes both threads give up, from memory and from chunks.
    #[test]
    fn two_thread_reader_builds_the_same_model_and_gives_up_as_one() {
        let model = crate::generate::generate(&crate::generate::NetworkSpec::new(6_000, 5)).unwrap();
        let text = write::to_string(&model, Format::Json);
        assert!(text.len() >= TWO_THREADS_ABOVE, "{} bytes", text.len());
        let tree = read_tree(&text, Format::Json).unwrap();
        assert_eq!(json_from_slice(text.as_bytes()).as_ref(), Some(&tree));
        assert_eq!(json_from_chunks(text.as_bytes(), u64::MAX, 64 << 10).as_ref(), Some(&tree));
        let mut edits = refused_edits(&text, |key| format!("\"{key}\": "));
        edits.extend(repeated_node_ids(&text, |id| format!("    {{\"id\": \"{id}")));
        for (edit, what) in edits {
            assert_ne!(edit, text, "{what}");
            assert!(json_from_slice(edit.as_bytes()).is_none(), "{what}");
            assert!(json_from_chunks(edit.as_bytes(), u64::MAX, 64 << 10).is_none(), "{what}");
            assert!(read_tree(&edit, Format::Json).is_err(), "{what}");
        }
    }

    /// The same for TOML: a text large enough to be read by two threads builds the tree
    /// reader's model, with a `[[controls]]` table between the nodes and between the links too
    /// (each ends a run of elements, and the next run goes on where it stopped), and anything the
    /// model refuses makes both threads give up, from memory and from chunks.
    #[test]
    fn two_thread_toml_reader_builds_the_same_model_and_gives_up_as_one() {
        let model = crate::generate::generate(&crate::generate::NetworkSpec::new(6_000, 5)).unwrap();
        let text = write::to_string(&model, Format::Toml);
        assert!(text.len() >= TWO_THREADS_ABOVE, "{} bytes", text.len());
        let control = |id: &str, link: &str| {
            format!("[[controls]]\nid = \"{id}\"\nlink = \"{link}\"\nstatus = \"closed\"\nwhen = {{ clock = \"06:00\" }}\n\n")
        };
        let middle_node = text.find("[[nodes]]\nid = \"J3000\"").unwrap();
        let middle_link = text.find("[[links]]\nid = \"P4000\"").unwrap();
        let interleaved = format!(
            "{}{}{}{}{}",
            &text[..middle_node],
            control("c-1", "P7"),
            &text[middle_node..middle_link],
            control("c-2", "P9"),
            &text[middle_link..]
        );
        for text in [&text, &interleaved] {
            let tree = read_tree(text, Format::Toml).unwrap();
            assert_eq!(toml_from_slice(text.as_bytes()).as_ref(), Some(&tree));
            assert_eq!(toml_from_chunks(text.as_bytes(), u64::MAX, 64 << 10).as_ref(), Some(&tree));
        }
        assert_eq!(read_tree(&interleaved, Format::Toml).unwrap().time.controls.len(), 2);
        let mut edits = refused_edits(&text, |key| format!("{key} = "));
        edits.push((interleaved.replacen("id = \"P4001\"", "id = \"P7\"", 1), "a duplicate link id after a control"));
        edits.extend(repeated_node_ids(&text, |id| format!("[[nodes]]\nid = \"{id}")));
        let after_control = interleaved.find("[[nodes]]\nid = \"J3001\"").unwrap();
        let j7 = interleaved.find("[[nodes]]\nid = \"J7\"").unwrap();
        let j7_len = interleaved[j7 + 1..].find("[[nodes]]").unwrap() + 1;
        edits.push((
            format!(
                "{}{}{}",
                &interleaved[..after_control],
                &interleaved[j7..j7 + j7_len],
                &interleaved[after_control..]
            ),
            "a junction's id repeated after a control",
        ));
        for (edit, what) in edits {
            assert_ne!(&edit, &text, "{what}");
            assert!(toml_from_slice(edit.as_bytes()).is_none(), "{what}");
            assert!(toml_from_chunks(edit.as_bytes(), u64::MAX, 64 << 10).is_none(), "{what}");
            assert!(read_tree(&edit, Format::Toml).is_err(), "{what}");
        }
    }

    /// `count` decimals of 1 to `max_digits` digits from a fixed seed: a sign one time in three,
    /// a decimal point anywhere, an exponent (of either sign, up to 59) one time in two; a
    /// leading zero only before the point unless `leading_zeros`.
    /// A string read a byte at a time (the reader before it scanned a word at a time): the
    /// string's text and where the cursor ends, or why it stops.
    fn string_by_bytes(b: &[u8], end: bool) -> Result<(String, usize), &'static str> {
        let mut j = 1;
        loop {
            match b.get(j) {
                Some(b'"') => break,
                Some(b'\\' | 0..=0x1f) => return Err("give up"),
                Some(_) => j += 1,
                None if end => return Err("give up"),
                None => return Err("more"),
            }
        }
        match std::str::from_utf8(&b[1..j]) {
            Ok(s) => Ok((s.to_owned(), j + 1)),
            Err(_) => Err("give up"),
        }
    }

    #[test]
    fn strings_read_a_word_at_a_time_are_those_read_a_byte_at_a_time() {
        // Every byte that ends or stops a plain run (and some that do not), at every place of
        // strings up to three words long, with the bytes cut short or not.
        let bytes: [&[u8]; 12] =
            [b"\"", b"\\", &[0], &[0x1f], b" ", &[0x7f], &[0x80], "é".as_bytes(), &[0xc3], b"a", b"~", b"!"];
        let mut checked = 0;
        for len in 0..24 {
            for at in 0..=len {
                for special in bytes {
                    let mut text = vec![b'"'];
                    text.extend(std::iter::repeat_n(b'J', at));
                    text.extend_from_slice(special);
                    text.extend(std::iter::repeat_n(b'7', len - at));
                    text.extend_from_slice(b"\", \"kind\": 1");
                    for cut in [text.len(), len + 1, len + 2, len / 2 + 1] {
                        let cut = cut.min(text.len());
                        for end in [true, false] {
                            let b = &text[..cut];
                            let mut c = Cursor { b, i: 0, end };
                            let got = match c.plain_string() {
                                Ok(s) => Ok((s.to_owned(), c.i)),
                                Err(Stop::GiveUp) => Err("give up"),
                                Err(Stop::More) => Err("more"),
                            };
                            assert_eq!(got, string_by_bytes(b, end), "{:?}", String::from_utf8_lossy(b));
                            checked += 1;
                        }
                    }
                }
            }
        }
        assert!(checked > 10_000);
    }

    #[test]
    fn stretches_compared_a_word_at_a_time_are_compared_as_bytes() {
        let stretch = b", \"minor_loss\": 0.0, \"check_valve\": ";
        for n in 0..stretch.len() {
            let s = &stretch[..n];
            for m in 0..=stretch.len() {
                assert_eq!(same_start(&stretch[..m], s), stretch[..m].starts_with(s), "{n} {m}");
            }
            // One byte changed at each place.
            for at in 0..n {
                let mut t = stretch.to_vec();
                t[at] ^= 0x20;
                assert!(!same_start(&t, s), "{n} {at}");
                assert!(same_start(&t[..n], &t[..n]));
            }
        }
    }

    fn decimals(seed: u64, count: usize, max_digits: u64, leading_zeros: bool) -> Vec<String> {
        let mut x = seed;
        let mut next = || {
            x = x.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1_442_695_040_888_963_407);
            x >> 11
        };
        (0..count)
            .map(|_| {
                let digits = 1 + next() % max_digits;
                let mut text = String::new();
                if next() % 3 == 0 {
                    text.push('-');
                }
                let point = next() % (digits + 1);
                for d in 0..digits {
                    if d == point && d > 0 {
                        text.push('.');
                    }
                    let nonzero = d == 0 && digits > 1 && point != 1 && !leading_zeros;
                    let c = if nonzero { 1 + next() % 9 } else { next() % 10 };
                    text.push(char::from(b'0' + c as u8));
                }
                if next() % 2 == 0 {
                    let e = next() % 60;
                    text.push_str(&format!("e{}{e}", ["", "-", "+"][(next() % 3) as usize]));
                }
                text
            })
            .collect()
    }

    /// Clinger's fast path gives the standard library's correctly rounded value wherever it
    /// answers, and answers on the numbers model files are made of.
    #[test]
    fn fast_path_numbers_equal_the_correctly_rounded_parse() {
        let mut answered = 0;
        for text in decimals(0x9e37_79b9_7f4a_7c15, 200_000, 20, false) {
            let expected: f64 = text.parse().unwrap();
            if let Some(v) = exact_float(text.as_bytes()) {
                answered += 1;
                assert_eq!(v.to_bits(), expected.to_bits(), "{text}");
            }
        }
        assert!(answered > 50_000, "{answered}");
        for (text, v) in
            [("9.2", 9.2), ("133.86", 133.86), ("0.0001", 1e-4), ("1e-6", 1e-6), ("-0.0", -0.0), ("120.0", 120.0)]
        {
            assert_eq!(exact_float(text.as_bytes()).map(f64::to_bits), Some(f64::to_bits(v)), "{text}");
        }
        // 17 significant digits, and exponents beyond ±22: the full parser's.
        for text in ["0.10742707159363658", "1e23", "1e-23", "9007199254740993", "1e99999"] {
            assert_eq!(exact_float(text.as_bytes()), None, "{text}");
        }
    }

    /// The one-pass number reader of flat elements gives what the general one gives (the same
    /// value, or giving up), on the generated decimals and on the edge cases of the grammar, and
    /// asks for more bytes where a number may go on in bytes not yet read.
    #[test]
    fn flat_numbers_are_the_general_readers_numbers() {
        let mut texts: Vec<String> = [
            "0",
            "-0",
            "00",
            "01",
            "-01",
            "1.",
            "-",
            "-.5",
            ".5",
            "0.5",
            "-0.0",
            "0.0",
            "120",
            "-7",
            "9.2",
            "9007199254740992",
            "9007199254740993",
            "900719925474099.3",
            "1234567890123456789",
            "12345678901234567890",
            "123456789012345678901234",
            "0.10742707159363658",
            "1e5",
            "1E-5",
            "2.5e+3",
            "0.0000000000000000000001",
            "0.00000000000000000000001",
            "1.5e",
            "1e+",
        ]
        .map(String::from)
        .into();
        texts.extend(decimals(0x2545_f491_4f6c_dd1d, 100_000, 21, true));
        let mut fast = 0;
        for text in &texts {
            for end in [",", "}", " "] {
                let t = format!("{text}{end}");
                let general = Cursor { b: t.as_bytes(), i: 0, end: true }.json_number().map(|v| match v {
                    Value::Int(i) => i as f64,
                    Value::Float(f) => f,
                    _ => unreachable!(),
                });
                let mut c = Cursor { b: t.as_bytes(), i: 0, end: true };
                let flat = c.flat_number();
                match (&general, &flat) {
                    (Ok(g), Ok(f)) => {
                        assert_eq!(g.to_bits(), f.to_bits(), "{t}");
                        assert_eq!(c.i, text.len(), "{t}");
                        fast += 1;
                    }
                    (Err(Stop::GiveUp), Err(Stop::GiveUp)) => {}
                    _ => panic!("{t}: {general:?} against {flat:?}"),
                }
            }
            // Cut at the end of the bytes read so far: more may follow, unless what is there
            // is already refused, as the general reader says.
            let general = Cursor { b: text.as_bytes(), i: 0, end: false }.json_number();
            let flat = Cursor { b: text.as_bytes(), i: 0, end: false }.flat_number();
            assert!(
                matches!(
                    (&general, &flat),
                    (Err(Stop::More), Err(Stop::More)) | (Err(Stop::GiveUp), Err(Stop::GiveUp))
                ),
                "{text}: {general:?} against {flat:?}"
            );
        }
        assert!(fast > 60_000, "{fast}");
    }

    /// Elements whose layout changes from one to the next (key order, spaces, keys added or
    /// left out) are read as the tree reader reads them: a predicted layout never decides.
    #[test]
    fn changing_layouts_are_read_as_the_tree_reader_reads_them() {
        let model = crate::generate::generate(&crate::generate::NetworkSpec::new(3_000, 9)).unwrap();
        let text = write::to_string(&model, Format::Json);
        let mut edited = String::new();
        for (i, line) in text.lines().enumerate() {
            let element = line.trim_start().starts_with("{\"id\": ") && line.ends_with("},");
            let line = if element && i % 5 == 1 {
                // The id last.
                let body = &line.trim_start()[1..line.trim_start().len() - 2];
                let (id, rest) = body.split_once(", ").unwrap();
                format!("    {{{rest}, {id}}},")
            } else if element && i % 7 == 2 {
                line.replace("\": ", "\":").replace(", \"", " ,\"")
            } else if element && i % 11 == 3 && line.contains("\"junction\"") {
                line.replace("\"kind\": \"junction\", ", "\"zone\": \"north\", ")
            } else if element && i % 13 == 4 {
                line.replace("\"kind\": \"junction\", ", "").replace("\"kind\": \"pipe\", ", "")
            } else {
                line.to_owned()
            };
            edited.push_str(&line);
            edited.push('\n');
        }
        assert_ne!(edited, text);
        let tree = read_tree(&edited, Format::Json).unwrap();
        assert_eq!(json_from_slice(edited.as_bytes()).as_ref(), Some(&tree));
        for chunk in [13, 4096] {
            let m = json_from_chunks(Trickle(edited.as_bytes(), chunk / 2 + 1), u64::MAX, chunk);
            assert_eq!(m.as_ref(), Some(&tree), "chunks of {chunk} bytes");
        }
        // A duplicate key where the layout predicts another: given up, as the tree reader
        // refuses it.
        let duplicate = edited.replacen("\"elevation\": ", "\"id\": \"Jx\", \"elevation\": ", 1);
        assert!(read_tree(&duplicate, Format::Json).is_err());
        assert!(json_from_slice(duplicate.as_bytes()).is_none());
    }

    /// A reader that hands out at most `n` bytes a call, so that every element is cut across
    /// chunk ends somewhere.
    struct Trickle<'a>(&'a [u8], usize);
    impl Read for Trickle<'_> {
        fn read(&mut self, out: &mut [u8]) -> std::io::Result<usize> {
            let n = self.1.min(out.len()).min(self.0.len());
            out[..n].copy_from_slice(&self.0[..n]);
            self.0 = &self.0[n..];
            Ok(n)
        }
    }

    /// The fast reader builds the very model the whole-text reader (serde_json into the value
    /// tree) builds, from memory and from chunks of any size, for every written model.
    #[test]
    fn fast_json_reader_builds_the_same_model_as_the_tree_reader() {
        for model in models() {
            let text = write::to_string(&model, Format::Json);
            let tree = read_tree(&text, Format::Json).unwrap();
            assert_eq!(json_from_slice(text.as_bytes()).as_ref(), Some(&tree));
            for chunk in [1, 7, 64, 4096] {
                let m = json_from_chunks(Trickle(text.as_bytes(), chunk.max(3) / 2 + 1), u64::MAX, chunk);
                assert_eq!(m.as_ref(), Some(&tree), "chunks of {chunk} bytes");
            }
            // Compact and spread-out layouts, keys sorted within each element.
            let value: serde_json::Value = serde_json::from_str(&text).unwrap();
            let compact = serde_json::to_string(&value).unwrap();
            if let Some(m) = json_from_slice(compact.as_bytes()) {
                assert_eq!(m, tree);
            }
            let pretty = serde_json::to_string_pretty(&value).unwrap();
            if let Some(m) = json_from_slice(pretty.as_bytes()) {
                assert_eq!(m, tree);
            }
            // A byte-order mark is not part of the text.
            assert_eq!(json_from_slice(format!("\u{feff}{text}").as_bytes()).as_ref(), Some(&tree));
            assert_eq!(json_from_chunks(format!("\u{feff}{text}").as_bytes(), u64::MAX, 2).as_ref(), Some(&tree));
            // Beyond the size limit: give up (the caller's limit speaks).
            assert!(json_from_chunks(text.as_bytes(), text.len() as u64 / 2, 64).is_none());
        }
    }

    /// The class of fault this reader could bring: accepting what the whole-text reader refuses,
    /// or reading something else than it does. Every edit of a written model at many places (a
    /// byte dropped, doubled or replaced by each of a set of troublesome bytes) is either given
    /// up, or read as the whole-text reader reads it.
    #[test]
    fn fast_json_reader_never_accepts_what_the_tree_reader_refuses() {
        let mut small = crate::generate::generate(&crate::generate::NetworkSpec::new(12, 2)).unwrap();
        small.set_status(0, LinkStatus::Closed).unwrap();
        let text = write::to_string(&small, Format::Json);
        let bytes = text.as_bytes();
        let mut accepted = 0;
        let mut tried = 0;
        let subs: &[u8] = b"{}[],:\"0-.e+ tfn1\\\n\x01";
        for at in (0..bytes.len()).step_by(3) {
            let mut edits: Vec<Vec<u8>> = vec![[&bytes[..at], &bytes[at + 1..]].concat()];
            edits.push([&bytes[..=at], &bytes[at..]].concat());
            for &b in subs {
                edits.push([&bytes[..at], &[b], &bytes[at + 1..]].concat());
            }
            for edit in edits {
                tried += 1;
                let fast = json_from_slice(&edit);
                let tree = std::str::from_utf8(&edit).ok().and_then(|t| read_str(t, Format::Json, "edit").ok());
                if let Some(m) = fast {
                    accepted += 1;
                    assert_eq!(Some(&m), tree.as_ref(), "edit at byte {at}: {}", String::from_utf8_lossy(&edit));
                }
            }
        }
        assert!(accepted > 0 && accepted < tried, "{accepted} of {tried}");
    }

    /// Numbers come out as serde_json (with correct rounding) reads them: integers exactly,
    /// decimals correctly rounded, from the shortest form to seventeen digits and beyond.
    #[test]
    fn numbers_are_read_as_serde_json_reads_them() {
        let cases = [
            "0",
            "7",
            "-7",
            "123456789012345678",
            "0.1",
            "0.30000000000000004",
            "0.10742707159363658",
            "0.034389341362837125",
            "1e-6",
            "1E5",
            "2.5e+3",
            "-0.0",
            "0.0",
            "9007199254740993.0",
            "2.2250738585072014e-308",
            "1.7976931348623157e308",
            "4.9e-324",
            "1e-100",
            "1e100",
            "3.141592653589793238462643383279",
            "120.00000000000001",
        ];
        for case in cases {
            let text = format!("[{case}]");
            let mut c = Cursor { b: text.as_bytes(), i: 0, end: true };
            let fast = json_value(&mut c, 0);
            let reference = tree::parse_json(&text).unwrap();
            match fast {
                Ok(v) => assert_eq!(
                    format!("{v:?}"),
                    format!("{reference:?}"),
                    "{case}: the bits must agree, not only the values"
                ),
                Err(Stop::GiveUp) => {} // left to serde_json
                Err(Stop::More) => panic!("{case}: the whole text was there"),
            }
        }
    }

    /// The demo models as written by hand (comments, inline tables, arrays over several lines,
    /// controls, patterns, tanks, pumps and valves) and every model as the writer writes it: the
    /// fast TOML reader builds the model the `toml` crate's document gives, or gives up.
    #[test]
    fn fast_toml_reader_builds_the_same_model_as_the_tree_reader() {
        let root = concat!(env!("CARGO_MANIFEST_DIR"), "/..");
        let mut texts = Vec::new();
        for dir in ["examples", "tests/data"] {
            for e in std::fs::read_dir(format!("{root}/{dir}")).unwrap().flatten() {
                let p = e.path();
                if p.extension().is_some_and(|e| e == "toml") && p.file_name().is_some_and(|n| n != "FIELDS.toml") {
                    texts.push(std::fs::read_to_string(p).unwrap());
                }
            }
        }
        let mut direct = 0;
        for text in &texts {
            if let Ok(tree) = read_tree(text, Format::Toml) {
                if let Some(m) = toml_from_slice(text.as_bytes()) {
                    assert_eq!(m, tree);
                    direct += 1;
                }
            }
        }
        assert!(direct >= 3, "the hand-written demo models are read in one pass ({direct})");
        for model in models() {
            let text = write::to_string(&model, Format::Toml);
            let tree = read_tree(&text, Format::Toml).unwrap();
            // Tables inside elements (`[[links.fittings]]`, as the `toml` crate writes a pump's or
            // a fitting's tables) are the other reader's; everything else is read here.
            let nested = text.lines().any(|l| l.trim_start().starts_with('[') && l.contains('.'));
            let expected = if nested { None } else { Some(&tree) };
            assert_eq!(toml_from_slice(text.as_bytes()).as_ref(), expected);
            for chunk in [1, 7, 64, 4096] {
                let m = toml_from_chunks(Trickle(text.as_bytes(), chunk.max(3) / 2 + 1), u64::MAX, chunk);
                assert_eq!(m.as_ref(), expected, "chunks of {chunk} bytes");
            }
            let crlf = text.replace('\n', "\r\n");
            assert_eq!(toml_from_slice(crlf.as_bytes()).as_ref(), expected);
            assert_eq!(toml_from_slice(format!("\u{feff}{text}").as_bytes()).as_ref(), expected);
        }
    }

    /// As for JSON: no edit of a TOML model is read differently from the `toml` crate's reading,
    /// and none it refuses is accepted.
    #[test]
    fn fast_toml_reader_never_accepts_what_the_tree_reader_refuses() {
        let demo = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/../examples/hillside.toml")).unwrap();
        let mut small = crate::generate::generate(&crate::generate::NetworkSpec::new(12, 2)).unwrap();
        small.set_status(0, LinkStatus::Closed).unwrap();
        let mut accepted = 0;
        let mut tried = 0;
        let subs: &[u8] = b"[]{},=\"'#0-.e+ \t\n\rtf_\\x7f\x01";
        for text in [write::to_string(&small, Format::Toml), demo] {
            let bytes = text.as_bytes();
            let step = (bytes.len() / 80).max(1);
            for at in (0..bytes.len()).step_by(step) {
                let mut edits: Vec<Vec<u8>> = vec![[&bytes[..at], &bytes[at + 1..]].concat()];
                edits.push([&bytes[..=at], &bytes[at..]].concat());
                for &b in subs {
                    edits.push([&bytes[..at], &[b], &bytes[at + 1..]].concat());
                }
                for edit in edits {
                    tried += 1;
                    let fast = toml_from_slice(&edit);
                    let tree = std::str::from_utf8(&edit).ok().and_then(|t| read_tree(t, Format::Toml).ok());
                    if let Some(m) = fast {
                        accepted += 1;
                        assert_eq!(Some(&m), tree.as_ref(), "edit at byte {at}: {}", String::from_utf8_lossy(&edit));
                    }
                }
            }
        }
        assert!(accepted > 0 && accepted < tried, "{accepted} of {tried}");
    }
}
