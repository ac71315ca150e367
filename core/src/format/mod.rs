//! The model file, format version 1: how a [`Model`](crate::model::Model) is written as TOML or
//! JSON and read back. The network model itself (in SI, whatever the file's units) is
//! [`crate::model`]; this module is the only place that knows the file's syntax, keys and units.
//!
//! Reading goes one way, in layers; the schema and the tree import no reader:
//!
//! 1. [`schema`]: the kinds of element a file may hold, as enums matched exhaustively, and the
//!    keys each accepts; the reader's unknown-key messages and suggestions take their lists from
//!    here (the `[criteria]` table's keys stand with the criteria, in `analysis::criteria`).
//! 2. [`tree`]: the syntax tree, the same for TOML and JSON (syntax errors with line and column;
//!    duplicate keys and absurd nesting refused).
//! 3. [`read`]: the tree into a model, element by element, units converted into SI; every error
//!    names the file, the element and the key.
//! 4. [`one_pass`]: fast readers of the common shape of a file, straight from bytes, one element
//!    at a time; they give up on anything unusual and [`read`] takes over, so a model and every
//!    error are the same whichever reader ran. These two still call each other: [`read`] tries
//!    the one-pass reader first, and the one-pass reader adds each element through [`read`]'s
//!    element functions.
//!
//! [`mod@write`] goes back: a model in its own units, keys in reading order, one element a line.

pub mod one_pass;
pub mod read;
pub mod schema;
pub mod tree;
pub mod write;

pub use read::{read_bytes, read_str};

use std::path::Path;

/// The syntax of a model file.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Format {
    /// TOML (`.toml`).
    Toml,
    /// JSON (`.json`).
    Json,
}

impl Format {
    /// The format a file name's extension says, if any.
    pub fn from_path(path: &Path) -> Option<Format> {
        match path.extension()?.to_str()?.to_ascii_lowercase().as_str() {
            "toml" => Some(Format::Toml),
            "json" => Some(Format::Json),
            _ => None,
        }
    }

    /// Guesses from the text: JSON starts with `{`.
    pub fn sniff(text: &str) -> Format {
        if text.trim_start().starts_with('{') {
            Format::Json
        } else {
            Format::Toml
        }
    }
}
