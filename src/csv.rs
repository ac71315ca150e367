//! CSV cells that open correctly in a spreadsheet: text quoted when it must be, ids that a
//! spreadsheet would take for a formula neutralised, numbers at a sensible precision.
//!
//! RFC 4180 quoting: a field with a comma, a quote or a line break is enclosed in quotes, with
//! its quotes doubled. A text cell that begins with `=`, `+`, `-` or `@` (or a tab or carriage
//! return) is read by spreadsheets as a formula — the "CSV injection" class of attack described in
//! the OWASP guidance on CSV injection — so such cells get a leading apostrophe, which spreadsheets
//! show as text and do not evaluate (common practice, the OWASP recommendation). Only text cells
//! (ids, kinds, states) are treated: numbers are written as numbers.

use std::borrow::Cow;
use std::fmt::Write as _;

/// Significant digits of a number cell. Seven digits keep a head of 1 000 m to the millimetre
/// and a flow of 1 000 l/s to 0.0001 l/s, well beyond what the model's data support, and keep the
/// numbers short.
pub const DIGITS: usize = 7;

/// A text cell: neutralised against formula injection, then quoted when it must be.
pub fn text(value: &str) -> Cow<'_, str> {
    let risky = value.starts_with(['=', '+', '-', '@', '\t', '\r']);
    let needs_quotes = value.contains([',', '"', '\n', '\r']);
    if !risky && !needs_quotes {
        return Cow::Borrowed(value);
    }
    let cell = if risky { Cow::Owned(format!("'{value}")) } else { Cow::Borrowed(value) };
    if needs_quotes {
        Cow::Owned(format!("\"{}\"", cell.replace('"', "\"\"")))
    } else {
        cell
    }
}

/// Appends a number cell to `out`: at most [`DIGITS`] significant digits, trailing zeros
/// dropped; between 10⁻⁴ and 10⁷ in plain decimals, otherwise in exponent form (`1.5e-7`);
/// nothing for a value that is not finite (an empty cell is a missing value to every
/// spreadsheet and data-frame reader). One formatting call a number: series of millions of
/// values are written at close to the speed of the simulation.
pub fn push_number(out: &mut String, v: f64) {
    if !v.is_finite() {
        return;
    }
    if v == 0.0 {
        out.push('0');
        return;
    }
    let magnitude = v.abs().log10().floor() as i32;
    let start = out.len();
    if (-4..7).contains(&magnitude) {
        let decimals = (DIGITS as i32 - 1 - magnitude).max(0) as usize;
        let _ = write!(out, "{v:.decimals$}");
        if decimals > 0 {
            let kept = out.trim_end_matches('0').trim_end_matches('.').len();
            out.truncate(kept);
        }
    } else {
        let _ = write!(out, "{:.*e}", DIGITS - 1, v);
        if let Some(e) = out[start..].find('e').map(|e| start + e) {
            let exponent = out[e..].to_owned();
            let kept = out[..e].trim_end_matches('0').trim_end_matches('.').len();
            out.truncate(kept);
            out.push_str(&exponent);
        }
    }
    // A value that rounds to zero in the last kept digit keeps no sign ("-0" is not a number
    // spreadsheets show).
    if &out[start..] == "-0" {
        out.truncate(start);
        out.push('0');
    }
}

/// A number cell as a string (see [`push_number`]).
pub fn number(v: f64) -> String {
    let mut s = String::new();
    push_number(&mut s, v);
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Formula injection: each of the characters the OWASP CSV-injection guidance lists as a
    /// formula start is neutralised, in plain and in quoted cells; other ids are unchanged.
    #[test]
    fn formula_injection_every_leading_character() {
        for lead in ["=", "+", "-", "@", "\t", "\r"] {
            let id = format!("{lead}SUM(A1:A9)");
            let cell = text(&id);
            let unquoted = cell.trim_start_matches('"');
            assert!(unquoted.starts_with('\''), "{id:?} -> {cell:?}");
        }
        assert_eq!(text("=1+2,3"), "\"'=1+2,3\"");
        assert_eq!(text("J-1"), "J-1");
        assert_eq!(text("plain"), "plain");
        assert_eq!(text("a,\"b\""), "\"a,\"\"b\"\"\"");
    }

    #[test]
    fn numbers_at_seven_significant_digits() {
        assert_eq!(number(12.345678901234), "12.34568");
        assert_eq!(number(0.1 + 0.2), "0.3");
        assert_eq!(number(-55.616), "-55.616");
        assert_eq!(number(1e-7), "1e-7");
        assert_eq!(number(123456789.0), "1.234568e8");
        assert_eq!(number(9.99999999), "10");
        assert_eq!(number(-0.000123456789), "-0.0001234568");
        assert_eq!(number(1234567.0), "1234567");
        assert_eq!(number(0.0), "0");
        assert_eq!(number(f64::NAN), "");
        assert_eq!(number(f64::INFINITY), "");
        // Every rounded value reads back within half a unit of the seventh digit.
        for v in [std::f64::consts::PI, 1234.5678901, 9.99999999e-3, 6.02214076e23] {
            let back: f64 = number(v).parse().unwrap();
            assert!(((back - v) / v).abs() <= 5e-7, "{v} -> {back}");
        }
    }
}
