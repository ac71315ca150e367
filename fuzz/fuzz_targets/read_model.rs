//! Arbitrary bytes into the model reader, as TOML and as JSON; models that read are checked
//! further: their `[criteria]` table, the model diagnostics, and a solve with a small iteration
//! cap followed by the criteria evaluation. Any panic is a bug (errors are fine).

#![no_main]

use libfuzzer_sys::fuzz_target;
use ringmain_core::analysis::{diagnose_model, run_scenario, CheckOptions, Criteria};
use ringmain_core::{read_bytes, Format, SolveOptions, Solver};

fuzz_target!(|data: &[u8]| {
    for format in [Format::Toml, Format::Json] {
        let Ok(mut model) = read_bytes(data, format, "fuzz") else { continue };
        model.options.max_iterations = model.options.max_iterations.min(20);
        let mut criteria = Criteria::default();
        if let Some(table) = model.criteria.clone() {
            let _ = criteria.apply(&table, &model);
        }
        let _ = diagnose_model(&model);
        if let Ok(mut solver) = Solver::new(&model) {
            let options = SolveOptions::from_model(&model);
            let _ = run_scenario(&model, &criteria, &mut solver, &options, None, &CheckOptions::default());
        }
    }
});
