//! The model file, format version 1: how a [`Model`] is written as TOML or
//! JSON and read back. The network model itself (in SI, whatever the file's units) is
//! [`crate::model`]; this module is the only place that knows the file's syntax, keys and units.
//!
//! Reading goes one way, in layers; the schema and the tree import no reader:
//!
//! 1. [`schema`]: the kinds of element a file may hold, as enums matched exhaustively, and the
//!    keys each accepts; the reader's unknown-key messages and suggestions take their lists from
//!    here (the `[criteria]` table's too).
//! 2. [`tree`]: the syntax tree, the same for TOML and JSON (syntax errors with line and column;
//!    duplicate keys and absurd nesting refused).
//! 3. [`read`]: the tree into a model, element by element, units converted into SI; every error
//!    names the file, the element and the key. [`criteria`] reads the `[criteria]` table (of a
//!    model or of a criteria file) into its typed form.
//! 4. [`one_pass`]: fast readers of the common shape of a file, straight from bytes, one element
//!    at a time, adding each element through [`read`]'s element functions; they give up on
//!    anything unusual.
//! 5. [`read_str`] and [`read_bytes`] (here): the one-pass reader where it serves, else [`read`]'s
//!    whole-text reader, so a model and every error are the same whichever reader ran. [`read`]
//!    does not know [`one_pass`]: the imports go one way.
//!
//! [`mod@write`] goes back: a model in its own units, keys in reading order, one element a line.

pub mod criteria;
pub mod one_pass;
pub mod read;
pub mod schema;
pub mod tree;
pub mod write;

use crate::error::ModelError;
use crate::model::Model;
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

/// Parses a model from text. `source` names the text in error messages (usually the file name).
pub fn read_str(text: &str, format: Format, source: &str) -> Result<Model, ModelError> {
    // A byte-order mark (some editors on Windows write one) is not part of the text, in JSON as
    // in TOML.
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    read_inner(text, format).map_err(|e| e.in_file(source))
}

/// Parses a model from bytes (checks that they are UTF-8 text first).
pub fn read_bytes(bytes: &[u8], format: Format, source: &str) -> Result<Model, ModelError> {
    match std::str::from_utf8(bytes) {
        Ok(text) => read_str(text, format, source),
        Err(e) => {
            let (line, col) = tree::line_column(&String::from_utf8_lossy(&bytes[..e.valid_up_to()]), usize::MAX);
            Err(ModelError {
                position: Some((line, col)),
                ..ModelError::new("the file is not UTF-8 text (is it a binary file?)")
            }
            .in_file(source))
        }
    }
}

/// The one-pass reader of `format` where it serves, else the whole-text reader (the same model
/// and the same errors either way; see the [module docs](self)).
fn read_inner(text: &str, format: Format) -> Result<Model, ModelError> {
    let fast = match format {
        Format::Json => one_pass::json_from_slice(text.as_bytes()),
        Format::Toml => one_pass::toml_from_slice(text.as_bytes()),
    };
    match fast {
        Some(model) => Ok(model),
        None => read::read_tree(text, format),
    }
}
