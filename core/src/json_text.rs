//! JSON text written by hand, at the speed of copying bytes: the per-element arrays of a results
//! report and of a model file (a million nodes and a million links at the largest sizes) are
//! formatted straight into large buffers, in parallel chunks when they are large, and written in
//! order.
//!
//! The text is byte for byte what serde_json writes through
//! [`crate::format::write::ElementPerLine`]: numbers are formatted by the same shortest
//! round-trip formatter serde_json itself uses (the `zmij` crate: the shortest digits that read
//! back to the same `f64`), non-finite numbers are `null`, and strings are escaped as serde_json
//! escapes them (a string that needs an escape at all, which no id of a written model has, is
//! handed to serde_json itself). The report's and the model writer's tests compare the text with
//! serde_json's on every demo model.
//!
//! Why by hand: serde's serializer makes a call per punctuation mark through the layout
//! formatter; at 1e5 elements that was 70 ms of the 130 ms of writing. Chunks of elements are
//! independent once each knows its index, so they are formatted on every core while the calling
//! thread writes the chunks before them.

use rayon::prelude::*;
use std::io::{self, Write};
use std::ops::Range;

/// Elements formatted per chunk (some 150 to 350 kB of text for nodes and links).
const CHUNK: usize = 1024;

/// Appends `v` as serde_json writes an `f64`: its shortest round-trip text, `null` when it is not
/// finite.
#[inline]
pub fn push_f64(out: &mut Vec<u8>, v: f64) {
    if v.is_finite() {
        let mut b = zmij::Buffer::new();
        push_bytes(out, b.format_finite(v).as_bytes());
    } else {
        out.extend_from_slice(b"null");
    }
}

/// Appends `bytes` to `out`, as `extend_from_slice` does. A number's text or an id is mostly 4
/// to 32 bytes long; for those, `extend_from_slice` of a length not known when compiling calls
/// the library's `memcpy` (a seventh of the formatting threads' time in a profile of the 1e6
/// results), where two overlapping fixed-size moves into a 32-byte block, appended whole and
/// cut back to length, do the same in place.
#[inline]
pub fn push_bytes(out: &mut Vec<u8>, bytes: &[u8]) {
    let n = bytes.len();
    let mut block = [0u8; 32];
    if (16..=32).contains(&n) {
        block[..16].copy_from_slice(&bytes[..16]);
        block[n - 16..n].copy_from_slice(&bytes[n - 16..]);
    } else if (8..16).contains(&n) {
        block[..8].copy_from_slice(&bytes[..8]);
        block[n - 8..n].copy_from_slice(&bytes[n - 8..]);
    } else if (4..8).contains(&n) {
        block[..4].copy_from_slice(&bytes[..4]);
        block[n - 4..n].copy_from_slice(&bytes[n - 4..]);
    } else {
        out.extend_from_slice(bytes);
        return;
    }
    let len = out.len();
    out.extend_from_slice(&block);
    out.truncate(len + n);
}

/// Appends `s` as a JSON string, escaped as serde_json escapes it.
#[inline]
pub fn push_str(out: &mut Vec<u8>, s: &str) {
    if s.bytes().all(|b| b >= 0x20 && b != b'"' && b != b'\\') {
        out.push(b'"');
        push_bytes(out, s.as_bytes());
        out.push(b'"');
    } else {
        // Quotes, backslashes or control characters: serde_json's own escaping (writing into
        // memory cannot fail).
        let _ = serde_json::to_writer(&mut *out, s);
    }
}

/// One JSON object on one line, `{"a": 1, "b": "x"}`, its keys in the order they are added.
/// Keys are the program's own names: plain ASCII, never escaped.
pub struct Line<'b> {
    out: &'b mut Vec<u8>,
    first: bool,
}

impl<'b> Line<'b> {
    /// Opens the object, `{`.
    pub fn open(out: &'b mut Vec<u8>) -> Self {
        out.push(b'{');
        Line { out, first: true }
    }

    #[inline]
    fn key(&mut self, key: &str) {
        if !self.first {
            self.out.extend_from_slice(b", ");
        }
        self.first = false;
        self.out.push(b'"');
        self.out.extend_from_slice(key.as_bytes());
        self.out.extend_from_slice(b"\": ");
    }

    /// A number (`null` when not finite).
    #[inline]
    pub fn num(&mut self, key: &str, v: f64) {
        self.key(key);
        push_f64(self.out, v);
    }

    /// A number, or no entry at all.
    #[inline]
    pub fn opt_num(&mut self, key: &str, v: Option<f64>) {
        if let Some(v) = v {
            self.num(key, v);
        }
    }

    /// A number or `null`, or no entry at all.
    #[inline]
    pub fn opt_nullable(&mut self, key: &str, v: Option<Option<f64>>) {
        match v {
            None => {}
            Some(None) => {
                self.key(key);
                self.out.extend_from_slice(b"null");
            }
            Some(Some(v)) => self.num(key, v),
        }
    }

    /// A string.
    #[inline]
    pub fn text(&mut self, key: &str, v: &str) {
        self.key(key);
        push_str(self.out, v);
    }

    /// A text, or no entry at all.
    #[inline]
    pub fn opt_text(&mut self, key: &str, v: Option<&str>) {
        if let Some(v) = v {
            self.text(key, v);
        }
    }

    /// A boolean.
    #[inline]
    pub fn flag(&mut self, key: &str, v: bool) {
        self.key(key);
        self.out.extend_from_slice(if v { b"true" } else { b"false" });
    }

    /// A flag, or no entry at all.
    #[inline]
    pub fn opt_flag(&mut self, key: &str, v: Option<bool>) {
        if let Some(v) = v {
            self.flag(key, v);
        }
    }

    /// A value that `write` appends (a nested array or object), or no entry at all.
    #[inline]
    pub fn opt_with<T>(
        &mut self,
        key: &str,
        v: Option<T>,
        write: impl FnOnce(&mut Vec<u8>, T) -> io::Result<()>,
    ) -> io::Result<()> {
        match v {
            Some(v) => {
                self.key(key);
                write(self.out, v)
            }
            None => Ok(()),
        }
    }

    /// Closes the object, `}`.
    pub fn close(self) {
        self.out.push(b'}');
    }
}

/// Writes an array of `count` elements that is a value of the top-level object of an
/// element-per-line document: `[`, each element on a line of its own indented by four spaces,
/// `,` between them, and `]` on a line indented by two; `[]` when empty. `element(i, buffer)`
/// appends the text of element `i`.
///
/// More than one chunk of elements is formatted in parallel, a batch of chunks at a time, while
/// the calling thread writes the batch before (memory holds two batches, never the whole text).
pub fn write_array<W: Write + ?Sized>(
    out: &mut W,
    count: usize,
    element: impl Fn(usize, &mut Vec<u8>) + Sync,
) -> io::Result<()> {
    try_write_array_in_chunks(out, count, CHUNK, |i, buf| {
        element(i, buf);
        Ok(())
    })
}

/// [`write_array`] with an element writer that may fail: the first error is returned, and
/// nothing of the batch it is in is written.
pub fn try_write_array<W: Write + ?Sized>(
    out: &mut W,
    count: usize,
    element: impl Fn(usize, &mut Vec<u8>) -> io::Result<()> + Sync,
) -> io::Result<()> {
    try_write_array_in_chunks(out, count, CHUNK, element)
}

/// [`write_array`] with chunks of `chunk` elements (the tests make them small).
pub fn write_array_in_chunks<W: Write + ?Sized>(
    out: &mut W,
    count: usize,
    chunk: usize,
    element: impl Fn(usize, &mut Vec<u8>) + Sync,
) -> io::Result<()> {
    try_write_array_in_chunks(out, count, chunk, |i, buf| {
        element(i, buf);
        Ok(())
    })
}

/// [`try_write_array`] with chunks of `chunk` elements.
pub fn try_write_array_in_chunks<W: Write + ?Sized>(
    out: &mut W,
    count: usize,
    chunk: usize,
    element: impl Fn(usize, &mut Vec<u8>) -> io::Result<()> + Sync,
) -> io::Result<()> {
    if count == 0 {
        return out.write_all(b"[]");
    }
    out.write_all(b"[")?;
    let chunk = chunk.max(1);
    let format = |range: Range<usize>, buf: &mut Vec<u8>| -> io::Result<()> {
        buf.clear();
        for i in range {
            if i > 0 {
                buf.push(b',');
            }
            buf.extend_from_slice(b"\n    ");
            element(i, buf)?;
        }
        Ok(())
    };
    if count <= chunk {
        let mut buf = Vec::new();
        format(0..count, &mut buf)?;
        out.write_all(&buf)?;
    } else {
        // Enough chunks per batch to keep every thread busy while one batch is written.
        let per_batch = 4 * rayon::current_num_threads().max(1);
        let batch = chunk * per_batch;
        let format_batch = |start: usize, bufs: &mut Vec<Vec<u8>>| -> io::Result<()> {
            bufs.resize_with(per_batch, Vec::new);
            bufs.par_iter_mut().enumerate().try_for_each(|(c, buf)| {
                let from = (start + c * chunk).min(count);
                format(from..(from + chunk).min(count), buf)
            })
        };
        let mut current = Vec::new();
        let mut next = Vec::new();
        format_batch(0, &mut current)?;
        let mut start = batch;
        loop {
            let more = start < count;
            let mut written = Ok(());
            let mut formatted = Ok(());
            rayon::in_place_scope(|s| {
                if more {
                    let next = &mut next;
                    let format_batch = &format_batch;
                    let formatted = &mut formatted;
                    s.spawn(move |_| *formatted = format_batch(start, next));
                }
                written = current.iter().try_for_each(|b| out.write_all(b));
            });
            written?;
            formatted?;
            if !more {
                break;
            }
            std::mem::swap(&mut current, &mut next);
            start += batch;
        }
    }
    out.write_all(b"\n  ]")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn short_runs_are_appended_as_extend_from_slice_appends_them() {
        let text: Vec<u8> = (0..80u8).map(|b| b'!' + b).collect();
        for before in [0, 1, 7, 31] {
            for n in 0..=text.len() {
                let mut expected = text[..before].to_vec();
                let mut got = expected.clone();
                expected.extend_from_slice(&text[before..before + n.min(text.len() - before)]);
                push_bytes(&mut got, &text[before..before + n.min(text.len() - before)]);
                assert_eq!(got, expected, "{before} {n}");
            }
        }
    }

    /// Every finite and non-finite `f64` class, and strings needing every kind of escape, as
    /// serde_json writes them (the reference the hand-written text must equal byte for byte).
    #[test]
    fn numbers_and_strings_are_written_as_serde_json_writes_them() {
        let numbers = [
            0.0,
            -0.0,
            1.0,
            -1.5,
            0.1,
            1e-7,
            1.1057474444276373e-7,
            123456789012345680.0,
            1e16,
            1e15,
            f64::MAX,
            f64::MIN_POSITIVE,
            5e-324,
            63.350718007047334,
            f64::NAN,
            f64::INFINITY,
            f64::NEG_INFINITY,
        ];
        for v in numbers {
            let mut ours = Vec::new();
            push_f64(&mut ours, v);
            let reference = serde_json::to_vec(&v).unwrap_or_default();
            assert_eq!(String::from_utf8_lossy(&ours), String::from_utf8_lossy(&reference), "{v:e}");
        }
        // A deterministic spread of bit patterns (a linear congruential walk over the 64 bits).
        let mut x: u64 = 0x0123_4567_89ab_cdef;
        for _ in 0..20_000 {
            x = x.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1_442_695_040_888_963_407);
            let v = f64::from_bits(x);
            let mut ours = Vec::new();
            push_f64(&mut ours, v);
            assert_eq!(ours, serde_json::to_vec(&v).unwrap_or_default(), "{v:e}");
        }
        for s in
            ["J1", "", "a\"b", "back\\slash", "tab\there", "line\nfeed", "\u{1}\u{1f}\u{7f}", "é-ü 中", "\r\u{8}\u{c}"]
        {
            let mut ours = Vec::new();
            push_str(&mut ours, s);
            assert_eq!(ours, serde_json::to_vec(s).unwrap_or_default(), "{s:?}");
        }
    }

    /// The array layout of every size around the chunk and batch boundaries, in parallel and
    /// not, equals one sequential formatting.
    #[test]
    fn arrays_in_parallel_chunks_equal_one_pass() {
        let element = |i: usize, buf: &mut Vec<u8>| {
            let mut l = Line::open(buf);
            l.num("i", i as f64);
            l.text("id", &format!("N{i}"));
            l.close();
        };
        for count in [0, 1, 2, 3, 7, 8, 9, 31, 32, 33, 100, 257, 1000] {
            let mut expected = Vec::new();
            write_array_in_chunks(&mut expected, count, usize::MAX, element).unwrap_or_default();
            for chunk in [1, 2, 3, 4, 5, 16, 1000] {
                let mut got = Vec::new();
                write_array_in_chunks(&mut got, count, chunk, element).unwrap_or_default();
                assert_eq!(String::from_utf8_lossy(&got), String::from_utf8_lossy(&expected), "{count} by {chunk}");
            }
        }
        let mut two = Vec::new();
        write_array_in_chunks(&mut two, 2, 1, element).unwrap_or_default();
        assert_eq!(
            String::from_utf8_lossy(&two),
            "[\n    {\"i\": 0.0, \"id\": \"N0\"},\n    {\"i\": 1.0, \"id\": \"N1\"}\n  ]"
        );
    }

    /// A write error in the middle of a parallel array is returned, not lost.
    #[test]
    fn write_errors_in_parallel_arrays_are_returned() {
        struct Full(usize);
        impl Write for Full {
            fn write(&mut self, b: &[u8]) -> io::Result<usize> {
                if self.0 < b.len() {
                    return Err(io::Error::other("disk full"));
                }
                self.0 -= b.len();
                Ok(b.len())
            }
            fn flush(&mut self) -> io::Result<()> {
                Ok(())
            }
        }
        let e =
            write_array_in_chunks(&mut Full(500), 1000, 3, |i, buf| buf.extend_from_slice(format!("{i}").as_bytes()));
        assert!(e.is_err());
    }
}
