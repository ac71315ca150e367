//! Property tests: arbitrary bytes and arbitrary mutations of valid models never panic the
//! reader, the criteria, the diagnostics, the solver (with a small iteration cap) or the error
//! snippets of the command-line program. proptest seeds its own cases and prints the seed of a
//! failure.

#[allow(dead_code)]
#[path = "../src/snippet.rs"]
mod snippet;

use proptest::prelude::*;

mod common;
use ringmain_core::analysis::{diagnose_model, run_scenario, CheckOptions, Criteria};
use ringmain_core::{Format, SolveOptions, Solver};

const EXAMPLE: &str = include_str!("../examples/larchfield.toml");

/// The example as JSON, written by the model writer (so both formats start from a valid model).
fn example_json() -> String {
    let model = ringmain_core::read_str(EXAMPLE, Format::Toml, "example").unwrap();
    ringmain_core::format::write::to_string(&model, Format::Json)
}

/// Everything the check command does with a file, minus the process.
fn exercise(bytes: &[u8], format: Format) {
    match ringmain_core::read_bytes(bytes, format, "input") {
        Err(e) => {
            let text = std::str::from_utf8(bytes).ok();
            let _ = snippet::render(&e, text, format, false);
        }
        Ok(mut model) => {
            model.options.max_iterations = model.options.max_iterations.min(25);
            let mut criteria = Criteria::default();
            if let Some(table) = &model.criteria {
                if let Err(e) = criteria.apply(table, &model) {
                    let _ = snippet::render(&e.in_file("input"), std::str::from_utf8(bytes).ok(), format, false);
                }
            }
            let _ = diagnose_model(&model);
            if let Ok(mut solver) = Solver::new(&model) {
                let options = SolveOptions::from_model(&model);
                let _ = run_scenario(&model, &criteria, &mut solver, &options, None, &CheckOptions::default());
            }
        }
    }
}

/// Tokens that often break readers.
const TOKENS: &[&str] = &[
    "=",
    "\"",
    "'",
    "[",
    "]",
    "{",
    "}",
    ",",
    ":",
    "\n",
    "[[nodes]]",
    "[[links]]",
    "[criteria]",
    "1e400",
    "-1e400",
    "nan",
    "inf",
    "-0",
    "0",
    "99999999999999999999",
    "\u{0}",
    "\u{1b}",
    "é",
    "id",
    "kind",
    "\"pump\"",
    "\"tank\"",
    "status = \"closed\"",
    "min_pressure = \"20 psi\"",
    "\"%\"",
    "true",
    "null",
];

#[derive(Clone, Debug)]
enum Mutation {
    Delete(usize, usize),
    Insert(usize, usize),
    Flip(usize, u8),
    Truncate(usize),
}

fn mutation() -> impl Strategy<Value = Mutation> {
    prop_oneof![
        (any::<usize>(), 0usize..40).prop_map(|(a, n)| Mutation::Delete(a, n)),
        (any::<usize>(), 0..TOKENS.len()).prop_map(|(a, t)| Mutation::Insert(a, t)),
        (any::<usize>(), any::<u8>()).prop_map(|(a, b)| Mutation::Flip(a, b)),
        any::<usize>().prop_map(Mutation::Truncate),
    ]
}

fn mutate(base: &str, mutations: &[Mutation]) -> Vec<u8> {
    let mut bytes = base.as_bytes().to_vec();
    for m in mutations {
        let len = bytes.len().max(1);
        match *m {
            Mutation::Delete(a, n) => {
                let a = a % len;
                let b = (a + n).min(bytes.len());
                if a < b {
                    bytes.drain(a..b);
                }
            }
            Mutation::Insert(a, t) => {
                let a = (a % len).min(bytes.len());
                bytes.splice(a..a, TOKENS[t].bytes());
            }
            Mutation::Flip(a, b) => {
                if !bytes.is_empty() {
                    let a = a % bytes.len();
                    bytes[a] = b;
                }
            }
            Mutation::Truncate(a) => bytes.truncate(a % len),
        }
    }
    bytes
}

proptest! {
    #![proptest_config(common::property_config(256))]

    #[test]
    fn arbitrary_bytes_never_panic(bytes in proptest::collection::vec(any::<u8>(), 0..2048)) {
        exercise(&bytes, Format::Toml);
        exercise(&bytes, Format::Json);
    }

    #[test]
    fn mutated_toml_models_never_panic(mutations in proptest::collection::vec(mutation(), 1..6)) {
        exercise(&mutate(EXAMPLE, &mutations), Format::Toml);
    }

    #[test]
    fn mutated_json_models_never_panic(mutations in proptest::collection::vec(mutation(), 1..6)) {
        exercise(&mutate(&example_json(), &mutations), Format::Json);
    }
}

#[test]
fn the_unmutated_examples_read_and_solve() {
    // The properties above start from valid models; make sure they are.
    for (text, format) in [(EXAMPLE.to_owned(), Format::Toml), (example_json(), Format::Json)] {
        let model = ringmain_core::read_str(&text, format, "example").unwrap();
        ringmain_core::solve(&model).unwrap();
    }
}
