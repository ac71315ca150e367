//! The model handle: loading, building, changing, saving and solving a network.

use crate::boundary::{
    copy_text, free_handle, handle, handle_mut, into_handle, out, out_opt, slice, text, Failure, LIVE_MODELS,
    LIVE_RESULTS,
};
use crate::codes::*;
use crate::convert::{Quantity, Units};
use crate::inputs::{get_one, set_one, Input};
use crate::results::ringmain_results;
use ringmain_core::format::write::to_string;
use ringmain_core::model::{HydraulicOptions, Pump, PumpDrive, Valve, WaterSpec};
use ringmain_core::physics::pump::{Efficiency, HeadCurve};
use ringmain_core::physics::WaterProperties;
use ringmain_core::solve::Conditions;
use ringmain_core::units::did_you_mean;
use ringmain_core::units::UnitSystem;
use ringmain_core::{
    read_bytes, Element, Format, Link, LinkKind, LinkStatus, Model, ModelError, Node, NodeKind, Pipe, SolveError,
    SolveOptions, Solver, Tank,
};
use std::collections::HashMap;
use std::ffi::c_char;
use std::path::Path;
use std::sync::Arc;

/// A water-distribution network model with its solver.
///
/// Made by `ringmain_model_new`, `ringmain_model_load`, `ringmain_model_from_toml`,
/// `ringmain_model_from_json` or `ringmain_model_clone`; owned by the caller, who frees it with
/// `ringmain_model_free` (once). It keeps the analysis of its network between solves, so changing
/// values and solving again is cheaper than loading again: the values the setters change
/// (demands, reservoir heads, tank levels, link statuses, pump speeds, valve settings, pipe
/// roughness and diameters) are the solver's input, kept beside the network, so that setting one
/// copies nothing and the next solve rebuilds only what that value feeds. Results made by `ringmain_model_solve`
/// are separate handles that stay valid after the model changes or is freed.
///
/// Threads: a model is not internally synchronised. It may be moved to another thread, and any
/// number of threads may call the functions that take a `const ringmain_model *` at the same time
/// provided none calls a function that takes a `ringmain_model *`; a call that takes a
/// `ringmain_model *` needs the model to itself. Distinct models may be used from distinct
/// threads at the same time without any locking.
pub struct ringmain_model {
    /// The network, and its values as last brought up to date (see `inputs`).
    pub(crate) model: Model,
    /// The values of the next solve: what the setters write and the getters read.
    pub(crate) conditions: Conditions,
    /// Tank levels set since the model last caught up, m, exactly as given (the conditions keep
    /// the head, floor + level).
    pub(crate) levels: HashMap<usize, f64>,
    /// Whether the conditions hold values the model does not.
    pub(crate) changed: bool,
    /// The file the model was read from, for error messages.
    pub(crate) source: Option<String>,
    pub(crate) solver: Option<Solver>,
    pub(crate) ids: Option<Arc<Ids>>,
    pub(crate) warm_start: bool,
}

/// Ids of the nodes and links of one network structure, shared by the results of its solves.
#[derive(Debug)]
pub(crate) struct Ids {
    pub nodes: Vec<String>,
    pub links: Vec<String>,
    pub node_index: HashMap<String, usize>,
    pub link_index: HashMap<String, usize>,
}

impl Ids {
    fn of(model: &Model) -> Self {
        let nodes: Vec<String> = model.nodes().iter().map(|n| n.id.to_string()).collect();
        let links: Vec<String> = model.links().iter().map(|l| l.id.to_string()).collect();
        let node_index = nodes.iter().enumerate().map(|(i, id)| (id.clone(), i)).collect();
        let link_index = links.iter().enumerate().map(|(i, id)| (id.clone(), i)).collect();
        Ids { nodes, links, node_index, link_index }
    }

    pub(crate) fn find_node(&self, id: &str) -> Result<usize, Failure> {
        self.node_index.get(id).copied().ok_or_else(|| not_found("node", id, self.nodes.iter().map(String::as_str)))
    }

    pub(crate) fn find_link(&self, id: &str) -> Result<usize, Failure> {
        self.link_index.get(id).copied().ok_or_else(|| not_found("link", id, self.links.iter().map(String::as_str)))
    }
}

fn not_found<'a>(what: &str, id: &str, ids: impl Iterator<Item = &'a str>) -> Failure {
    let hint = did_you_mean(id, ids, '\'');
    Failure::new(
        ringmain_status::RINGMAIN_NOT_FOUND,
        format!("no {what} has the id '{}'{hint}", ringmain_core::error::printable(id)),
    )
}

pub(crate) fn out_of_range(what: &str, index: usize, count: usize) -> Failure {
    let valid = if count == 0 { format!("there are no {what}s") } else { format!("valid: 0 to {}", count - 1) };
    Failure::new(ringmain_status::RINGMAIN_OUT_OF_RANGE, format!("{what} index {index} is out of range ({valid})"))
}

impl ringmain_model {
    pub(crate) fn from_model(model: Model, source: Option<String>) -> Self {
        let conditions = Conditions::from_model(&model);
        ringmain_model {
            model,
            conditions,
            levels: HashMap::new(),
            changed: false,
            source,
            solver: None,
            ids: None,
            warm_start: false,
        }
    }

    pub(crate) fn units(&self) -> Units {
        self.model.converter()
    }

    fn node(&self, index: usize) -> Result<&Node, Failure> {
        self.model.nodes().get(index).ok_or_else(|| out_of_range("node", index, self.model.nodes().len()))
    }

    fn link(&self, index: usize) -> Result<&Link, Failure> {
        self.model.links().get(index).ok_or_else(|| out_of_range("link", index, self.model.links().len()))
    }

    pub(crate) fn ids(&mut self) -> Arc<Ids> {
        self.ids.get_or_insert_with(|| Arc::new(Ids::of(&self.model))).clone()
    }

    /// The index of an end node of a new link.
    fn end(&self, link_id: &str, key: &str, node_id: &str) -> Result<usize, Failure> {
        self.model.node_index(node_id).ok_or_else(|| {
            let hint = did_you_mean(node_id, self.model.nodes().iter().map(|n| n.id.as_str()), '\'');
            let e = ModelError::at(
                Some(Element::Link(link_id.to_owned())),
                Some(key),
                format!("refers to node '{}', which is not defined{hint}", ringmain_core::error::printable(node_id)),
            );
            Failure::new(ringmain_status::RINGMAIN_NOT_FOUND, e.to_string())
        })
    }

    /// Adds a node: the model first catches up with the values set, and the new structure gets
    /// its conditions.
    fn add_node(&mut self, node: Node) -> Result<usize, Failure> {
        self.catch_up()?;
        let index = self.model.add_node(node)?;
        self.structure_changed();
        Ok(index)
    }

    /// Adds a link, as [`ringmain_model::add_node`] adds a node.
    fn add_link(&mut self, link: Link) -> Result<usize, Failure> {
        self.catch_up()?;
        let index = self.model.add_link(link)?;
        self.structure_changed();
        Ok(index)
    }

    /// Adds a node (tests of the other modules).
    #[cfg(test)]
    pub(crate) fn add_node_for_test(&mut self, node: Node) -> usize {
        self.add_node(node).unwrap()
    }

    fn structure_changed(&mut self) {
        self.conditions = Conditions::from_model(&self.model);
        self.ids = None;
    }

    fn solve(&mut self) -> Result<ringmain_results, Failure> {
        let mut options = SolveOptions::from_model(&self.model);
        options.warm_start = self.warm_start;
        let solver = match &mut self.solver {
            Some(s) => s,
            None => {
                let model = &self.model;
                let solver = crate::threads::install(|| Solver::new(model))?.map_err(|e| self.solve_failure(e))?;
                self.solver.insert(solver)
            }
        };
        let (model, conditions) = (&self.model, &self.conditions);
        let solution = crate::threads::install(|| solver.solve(model, conditions, &options))?
            .map_err(|e| self.solve_failure(e))?;
        let ids = self.ids();
        Ok(ringmain_results::new(&self.model, &solution, ids))
    }

    pub(crate) fn solve_failure(&self, error: SolveError) -> Failure {
        match (error, &self.source) {
            (SolveError::Model(e), Some(file)) => Failure::from(e.in_file(file.clone())),
            (e, Some(file)) => {
                let f = Failure::solve(e);
                Failure::new(f.status, format!("{file}: {}", f.message))
            }
            (e, None) => Failure::solve(e),
        }
    }
}

pub(crate) fn wrong_kind(element: Element, key: &str, needs: &str, found: &str) -> Failure {
    let e = ModelError::at(Some(element), Some(key), format!("applies to {needs} only; this one is a {found}"));
    Failure::wrong_kind(e.to_string())
}

/// `x` or `None` when `x` is NaN (an optional value not given).
fn optional(x: f64) -> Option<f64> {
    (!x.is_nan()).then_some(x)
}

fn load_file(path: &str) -> Result<Model, Failure> {
    let bytes = std::fs::read(path)
        .map_err(|e| Failure::new(ringmain_status::RINGMAIN_IO, format!("{path}: cannot read the file: {e}")))?;
    let format = Format::from_path(Path::new(path)).unwrap_or_else(|| Format::sniff(&String::from_utf8_lossy(&bytes)));
    Ok(read_bytes(&bytes, format, path)?)
}

/// Writes a new model handle through `out`.
fn give(out: crate::boundary::Out<*mut ringmain_model>, model: ringmain_model) {
    out.write(into_handle(model, &LIVE_MODELS));
}

// ---------------------------------------------------------------------------------------------
// Making and freeing models
// ---------------------------------------------------------------------------------------------

/// Makes an empty model whose values will be given in the units chosen here, and writes it to
/// `*out`. Each unit is one of the constants of its enum (`ringmain_length_unit`...); zero for
/// each gives the defaults: lengths in m, diameters in mm, flows in L/s, pressures in m of water,
/// roughness in mm, Hazen–Williams friction. Water at 20 °C; change it with
/// `ringmain_model_set_water_temperature`. The units cannot be changed later.
///
/// Errors: `RINGMAIN_INVALID_ARGUMENT` for an integer that names no constant;
/// `RINGMAIN_NULL_POINTER` when `out` is NULL.
///
/// # Safety
/// `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_new(
    length_unit: u32,
    diameter_unit: u32,
    flow_unit: u32,
    pressure_unit: u32,
    roughness_unit: u32,
    headloss: u32,
    out: *mut *mut ringmain_model,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let out = unsafe { self::out(out, "out") }?;
        let units = UnitSystem {
            length: ringmain_length_unit::from_code(length_unit, "length_unit")?.unit(),
            diameter: ringmain_diameter_unit::from_code(diameter_unit, "diameter_unit")?.unit(),
            flow: ringmain_flow_unit::from_code(flow_unit, "flow_unit")?.unit(),
            pressure: ringmain_pressure_unit::from_code(pressure_unit, "pressure_unit")?.unit(),
            roughness: ringmain_roughness_unit::from_code(roughness_unit, "roughness_unit")?.unit(),
        };
        let options = HydraulicOptions {
            headloss: ringmain_headloss::from_code(headloss, "headloss")?.law(),
            ..HydraulicOptions::default()
        };
        give(out, ringmain_model::from_model(Model::new(units, options), None));
        Ok(())
    }
}

/// Reads a model file (TOML or JSON, told by the extension `.toml` or `.json`, else by the first
/// character) and writes the new model to `*out`. Its values are in the units of its `[units]`
/// table.
///
/// Errors: `RINGMAIN_IO` when the file cannot be read; `RINGMAIN_MODEL_INVALID` when it is not a
/// valid model (the last error names the file, line, element and key).
///
/// # Safety
/// `path` is NULL or a NUL-terminated string; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_load(path: *const c_char, out: *mut *mut ringmain_model) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (path, out) = unsafe { (text(path, "path")?, self::out(out, "out")?) };
        let model = load_file(path)?;
        give(out, ringmain_model::from_model(model, Some(path.to_owned())));
        Ok(())
    }
}

unsafe fn from_text(
    text: *const c_char,
    len: usize,
    out: *mut *mut ringmain_model,
    format: Format,
    source: &str,
) -> Result<(), Failure> {
    // SAFETY: forwarded from the exported functions' contracts.
    let (bytes, out) = unsafe { (slice(text.cast::<u8>(), len, "text")?, self::out(out, "out")?) };
    let model = read_bytes(bytes, format, source)?;
    give(out, ringmain_model::from_model(model, None));
    Ok(())
}

/// Reads a model from TOML text: `len` bytes at `text` (UTF-8; no terminating NUL needed) and
/// writes the new model to `*out`.
///
/// Errors: `RINGMAIN_MODEL_INVALID` when the text is not a valid model (the last error names the
/// line, element and key, with "TOML text" in place of a file name).
///
/// # Safety
/// `text` is NULL or points to `len` readable bytes; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_from_toml(
    text: *const c_char,
    len: usize,
    out: *mut *mut ringmain_model,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { from_text(text, len, out, Format::Toml, "TOML text") } }
}

/// Reads a model from JSON text: `len` bytes at `text` (UTF-8; no terminating NUL needed) and
/// writes the new model to `*out`. Errors as `ringmain_model_from_toml`.
///
/// # Safety
/// `text` is NULL or points to `len` readable bytes; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_from_json(
    text: *const c_char,
    len: usize,
    out: *mut *mut ringmain_model,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { from_text(text, len, out, Format::Json, "JSON text") } }
}

/// Makes an independent copy of a model (values, units and options; not its solver state) and
/// writes it to `*out`. Useful to give each thread its own model.
///
/// # Safety
/// `model` is NULL or a live model; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_clone(
    model: *const ringmain_model,
    out: *mut *mut ringmain_model,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, out) = unsafe { (handle(model, "model")?, self::out(out, "out")?) };
        let mut copy = ringmain_model::from_model(m.current()?.into_owned(), m.source.clone());
        copy.warm_start = m.warm_start;
        give(out, copy);
        Ok(())
    }
}

/// Frees a model. NULL is ignored. Results made from the model stay valid.
///
/// # Safety
/// `model` is NULL or a live model, not used again afterwards.
#[no_mangle]
pub unsafe extern "C" fn ringmain_model_free(model: *mut ringmain_model) {
    // A free function cannot report failure; a panic while dropping is caught and ignored.
    let _ = ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { free_handle(model, &LIVE_MODELS) };
        Ok(())
    };
}

/// Checks the whole model as a solve would (at least one reservoir or tank, a plausible water
/// temperature). Errors: `RINGMAIN_MODEL_INVALID`.
///
/// # Safety
/// `model` is NULL or a live model.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_validate(model: *const ringmain_model) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let m = unsafe { handle(model, "model") }?;
        m.model.validate()?;
        Ok(())
    }
}

// ---------------------------------------------------------------------------------------------
// Saving
// ---------------------------------------------------------------------------------------------

fn model_text(model: &Model, format: Format) -> Result<String, Failure> {
    let text = to_string(model, format);
    if text.trim().is_empty() {
        return Err(Failure::new(ringmain_status::RINGMAIN_MODEL_INVALID, "the model could not be written as text"));
    }
    Ok(text)
}

/// Writes the model to a file in its own units, as TOML or JSON by the extension of `path`
/// (`.toml` or `.json`). The file reads back into an equal model. It is written under a
/// temporary name in the same directory and renamed over `path` only once whole, so a save that
/// fails leaves an existing file as it was and no partial file behind.
///
/// Errors: `RINGMAIN_INVALID_ARGUMENT` for another extension; `RINGMAIN_IO` when the file cannot
/// be written.
///
/// # Safety
/// `model` is NULL or a live model; `path` is NULL or a NUL-terminated string.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_save(model: *const ringmain_model, path: *const c_char) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, path) = unsafe { (handle(model, "model")?, text(path, "path")?) };
        let format = Format::from_path(Path::new(path)).ok_or_else(|| {
            Failure::invalid(format!("{path}: the file name must end in .toml or .json to choose the format"))
        })?;
        let io_error = |e: std::io::Error| Failure::new(ringmain_status::RINGMAIN_IO, format!("{path}: cannot write the file: {e}"));
        let model = m.current()?;
        // Under a temporary name beside it, renamed over it once whole: a failed save leaves the
        // file as it was (see `ringmain_core::output`).
        ringmain_core::output::write_file(Path::new(path), |out| {
            ringmain_core::format::write::write_to(&model, format, out)
        })
        .map_err(io_error)?;
        Ok(())
    }
}

/// Writes the model as model-file text (`format` is a `ringmain_format`) into `buf` (`len`
/// bytes, NUL-terminated) and its size, terminating NUL included, to `needed` (may be NULL).
/// Returns `RINGMAIN_BUFFER_TOO_SMALL` (writing only `needed`) when `len` is too small: call with
/// `len = 0` to ask for the size.
///
/// # Safety
/// `model` is NULL or a live model; `buf` is NULL or `len` writable bytes; `needed` is NULL or
/// writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_write(
    model: *const ringmain_model,
    format: u32,
    buf: *mut c_char,
    len: usize,
    needed: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, needed) = unsafe { (handle(model, "model")?, out_opt(needed, "needed")?) };
        let format = match ringmain_format::from_code(format, "format")? {
            ringmain_format::RINGMAIN_FORMAT_TOML => Format::Toml,
            ringmain_format::RINGMAIN_FORMAT_JSON => Format::Json,
        };
        let text = model_text(&*m.current()?, format)?;
        // SAFETY: the caller's contract above.
        unsafe { copy_text(&text, buf, len, needed) }
    }
}

// ---------------------------------------------------------------------------------------------
// Reading the model
// ---------------------------------------------------------------------------------------------

/// Writes the number of nodes to `*out`.
///
/// # Safety
/// `model` is NULL or a live model; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_node_count(model: *const ringmain_model, out: *mut usize) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, out) = unsafe { (handle(model, "model")?, self::out(out, "out")?) };
        out.write(m.model.nodes().len());
        Ok(())
    }
}

/// Writes the number of links to `*out`.
///
/// # Safety
/// `model` is NULL or a live model; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_link_count(model: *const ringmain_model, out: *mut usize) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, out) = unsafe { (handle(model, "model")?, self::out(out, "out")?) };
        out.write(m.model.links().len());
        Ok(())
    }
}

/// Writes the index (0-based, in the order nodes were read or added) of the node `id` to
/// `*out`. Errors: `RINGMAIN_NOT_FOUND` (the last error suggests a close id).
///
/// # Safety
/// `model` is NULL or a live model; `id` is NULL or a NUL-terminated string; `out` is NULL or
/// writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_node_index(
    model: *const ringmain_model,
    id: *const c_char,
    out: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, id, out) = unsafe { (handle(model, "model")?, text(id, "id")?, self::out(out, "out")?) };
        let index = m
            .model
            .node_index(id)
            .ok_or_else(|| not_found("node", id, m.model.nodes().iter().map(|n| n.id.as_str())))?;
        out.write(index);
        Ok(())
    }
}

/// Writes the index of the link `id` to `*out`. Errors: `RINGMAIN_NOT_FOUND`.
///
/// # Safety
/// `model` is NULL or a live model; `id` is NULL or a NUL-terminated string; `out` is NULL or
/// writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_link_index(
    model: *const ringmain_model,
    id: *const c_char,
    out: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, id, out) = unsafe { (handle(model, "model")?, text(id, "id")?, self::out(out, "out")?) };
        let index = m
            .model
            .link_index(id)
            .ok_or_else(|| not_found("link", id, m.model.links().iter().map(|l| l.id.as_str())))?;
        out.write(index);
        Ok(())
    }
}

/// Copies the id of node `index` into `buf` (`len` bytes, NUL-terminated); its size, NUL
/// included, goes to `needed` (may be NULL). `RINGMAIN_BUFFER_TOO_SMALL` writes only `needed`.
///
/// # Safety
/// `model` is NULL or a live model; `buf` is NULL or `len` writable bytes; `needed` is NULL or
/// writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_node_id(
    model: *const ringmain_model,
    index: usize,
    buf: *mut c_char,
    len: usize,
    needed: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, needed) = unsafe { (handle(model, "model")?, out_opt(needed, "needed")?) };
        let node = m.node(index)?;
        // SAFETY: the caller's contract above.
        unsafe { copy_text(&node.id, buf, len, needed) }
    }
}

/// Copies the id of link `index` into `buf`, as `ringmain_model_node_id`.
///
/// # Safety
/// As `ringmain_model_node_id`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_link_id(
    model: *const ringmain_model,
    index: usize,
    buf: *mut c_char,
    len: usize,
    needed: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, needed) = unsafe { (handle(model, "model")?, out_opt(needed, "needed")?) };
        let link = m.link(index)?;
        // SAFETY: the caller's contract above.
        unsafe { copy_text(&link.id, buf, len, needed) }
    }
}

/// Copies the model's title (empty when it has none) into `buf`, as `ringmain_model_node_id`.
///
/// # Safety
/// As `ringmain_model_node_id`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_title(
    model: *const ringmain_model,
    buf: *mut c_char,
    len: usize,
    needed: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, needed) = unsafe { (handle(model, "model")?, out_opt(needed, "needed")?) };
        // SAFETY: the caller's contract above.
        unsafe { copy_text(m.model.title.as_deref().unwrap_or(""), buf, len, needed) }
    }
}

/// Writes the kind of node `index` (a `ringmain_node_kind`) to `*out`.
///
/// # Safety
/// `model` is NULL or a live model; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_node_kind(
    model: *const ringmain_model,
    index: usize,
    out: *mut u32,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, out) = unsafe { (handle(model, "model")?, self::out(out, "out")?) };
        let kind = match &m.node(index)?.kind {
            NodeKind::Junction { .. } => ringmain_node_kind::RINGMAIN_NODE_JUNCTION,
            NodeKind::Reservoir { .. } => ringmain_node_kind::RINGMAIN_NODE_RESERVOIR,
            NodeKind::Tank(_) => ringmain_node_kind::RINGMAIN_NODE_TANK,
            other => {
                return Err(Failure::wrong_kind(format!(
                    "node index {index}: a {} has no code in this version of the interface",
                    other.label()
                )))
            }
        };
        out.write(kind as u32);
        Ok(())
    }
}

/// Writes the kind of link `index` (a `ringmain_link_kind`) to `*out`.
///
/// # Safety
/// `model` is NULL or a live model; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_link_kind(
    model: *const ringmain_model,
    index: usize,
    out: *mut u32,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, out) = unsafe { (handle(model, "model")?, self::out(out, "out")?) };
        let kind = match &m.link(index)?.kind {
            LinkKind::Pipe(_) => ringmain_link_kind::RINGMAIN_LINK_PIPE,
            LinkKind::Pump(_) => ringmain_link_kind::RINGMAIN_LINK_PUMP,
            LinkKind::Valve(_) => ringmain_link_kind::RINGMAIN_LINK_VALVE,
            other => {
                return Err(Failure::wrong_kind(format!(
                    "link index {index}: a {} has no code in this version of the interface",
                    other.label()
                )))
            }
        };
        out.write(kind as u32);
        Ok(())
    }
}

/// Writes the indices of the start (`from`) and end (`to`) nodes of link `index`. Flow is
/// positive from `from` to `to`.
///
/// # Safety
/// `model` is NULL or a live model; `from` and `to` are NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_link_nodes(
    model: *const ringmain_model,
    index: usize,
    from: *mut usize,
    to: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, from, to) = unsafe { (handle(model, "model")?, out(from, "from")?, out(to, "to")?) };
        let link = m.link(index)?;
        from.write(link.from);
        to.write(link.to);
        Ok(())
    }
}

/// Copies the label of the unit the model uses for a quantity (`quantity` is a
/// `ringmain_quantity`), such as "m", "L/s" or "kPa", into `buf`, as `ringmain_model_node_id`.
///
/// # Safety
/// As `ringmain_model_node_id`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_unit_label(
    model: *const ringmain_model,
    quantity: u32,
    buf: *mut c_char,
    len: usize,
    needed: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, needed) = unsafe { (handle(model, "model")?, out_opt(needed, "needed")?) };
        let u = m.units();
        let label = u.label(match ringmain_quantity::from_code(quantity, "quantity")? {
            ringmain_quantity::RINGMAIN_QUANTITY_LENGTH => Quantity::Length,
            ringmain_quantity::RINGMAIN_QUANTITY_DIAMETER => Quantity::Diameter,
            ringmain_quantity::RINGMAIN_QUANTITY_FLOW => Quantity::Flow,
            ringmain_quantity::RINGMAIN_QUANTITY_PRESSURE => Quantity::Pressure,
            ringmain_quantity::RINGMAIN_QUANTITY_ROUGHNESS => Quantity::PipeRoughness,
            ringmain_quantity::RINGMAIN_QUANTITY_VELOCITY => Quantity::Velocity,
            ringmain_quantity::RINGMAIN_QUANTITY_POWER => Quantity::Power,
        });
        // SAFETY: the caller's contract above.
        unsafe { copy_text(label, buf, len, needed) }
    }
}

/// Writes the model's friction law (a `ringmain_headloss`) to `*out`.
///
/// # Safety
/// `model` is NULL or a live model; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_get_headloss(model: *const ringmain_model, out: *mut u32) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, out) = unsafe { (handle(model, "model")?, self::out(out, "out")?) };
        out.write(ringmain_headloss::of(m.model.options.headloss) as u32);
        Ok(())
    }
}

/// Reads one value of node `index`: the shared body of the node getters.
unsafe fn node_value(
    model: *const ringmain_model,
    index: usize,
    out: *mut f64,
    value: impl FnOnce(&Node, &Units) -> Result<f64, Failure>,
) -> Result<(), Failure> {
    // SAFETY: forwarded from the exported functions' contracts.
    let (m, out) = unsafe { (handle(model, "model")?, self::out(out, "out")?) };
    let v = value(m.node(index)?, &m.units())?;
    out.write(v);
    Ok(())
}

/// Writes the elevation of node `index` (length unit) to `*out`: ground level of a junction, floor
/// of a tank, water surface of a reservoir unless given otherwise.
///
/// # Safety
/// `model` is NULL or a live model; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_get_elevation(
    model: *const ringmain_model,
    node: usize,
    out: *mut f64,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { node_value(model, node, out, |n, u| Ok(u.from_si(Quantity::Length, n.elevation))) } }
}

/// Writes the demand of junction `node` (flow unit) to `*out`. Errors: `RINGMAIN_WRONG_KIND` for
/// a reservoir or tank.
///
/// # Safety
/// `model` is NULL or a live model; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_get_demand(
    model: *const ringmain_model,
    node: usize,
    out: *mut f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { get_one(model, Input::Demand, node, out) }
    }
}

/// Writes the head of reservoir `node` (length unit) to `*out`. Errors: `RINGMAIN_WRONG_KIND`.
///
/// # Safety
/// `model` is NULL or a live model; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_get_reservoir_head(
    model: *const ringmain_model,
    node: usize,
    out: *mut f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { get_one(model, Input::ReservoirHead, node, out) }
    }
}

/// Writes the water level of tank `node` above its floor (length unit) to `*out`. Errors:
/// `RINGMAIN_WRONG_KIND`.
///
/// # Safety
/// `model` is NULL or a live model; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_get_tank_level(
    model: *const ringmain_model,
    node: usize,
    out: *mut f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { get_one(model, Input::TankLevel, node, out) }
    }
}

/// Writes the status set on link `link` (a `ringmain_link_status`) to `*out`: a valve that
/// regulates is `RINGMAIN_STATUS_AUTOMATIC`.
///
/// # Safety
/// `model` is NULL or a live model; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_get_link_status(
    model: *const ringmain_model,
    link: usize,
    out: *mut u32,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, out) = unsafe { (handle(model, "model")?, self::out(out, "out")?) };
        m.link(link)?;
        out.write(m.link_status(link) as u32);
        Ok(())
    }
}

/// Writes the relative speed of pump `link` (1 = the speed of its curve) to `*out`. Errors:
/// `RINGMAIN_WRONG_KIND`.
///
/// # Safety
/// `model` is NULL or a live model; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_get_pump_speed(
    model: *const ringmain_model,
    link: usize,
    out: *mut f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { get_one(model, Input::PumpSpeed, link, out) }
    }
}

/// Writes the setting of valve `link` to `*out`: a pressure (pressure unit) for
/// pressure-reducing and pressure-sustaining valves, a flow (flow unit) for flow-control valves,
/// the loss coefficient K for throttle valves. Errors: `RINGMAIN_WRONG_KIND`.
///
/// # Safety
/// `model` is NULL or a live model; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_get_valve_setting(
    model: *const ringmain_model,
    link: usize,
    out: *mut f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { get_one(model, Input::ValveSetting, link, out) }
    }
}

/// Writes the type of valve `link` (a `ringmain_valve_type`) to `*out`. Errors:
/// `RINGMAIN_WRONG_KIND`.
///
/// # Safety
/// `model` is NULL or a live model; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_get_valve_type(
    model: *const ringmain_model,
    link: usize,
    out: *mut u32,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, out) = unsafe { (handle(model, "model")?, self::out(out, "out")?) };
        let l = m.link(link)?;
        match &l.kind {
            LinkKind::Valve(v) => out.write(ringmain_valve_type::of(v.valve) as u32),
            other => return Err(wrong_kind(Element::Link(l.id.to_string()), "valve", "valves", other.label())),
        }
        Ok(())
    }
}

/// Writes the roughness of pipe `link` to `*out`: the Hazen–Williams C, or the absolute roughness
/// (roughness unit) under Darcy–Weisbach. Errors: `RINGMAIN_WRONG_KIND`.
///
/// # Safety
/// `model` is NULL or a live model; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_get_pipe_roughness(
    model: *const ringmain_model,
    link: usize,
    out: *mut f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { get_one(model, Input::PipeRoughness, link, out) }
    }
}

/// Writes the internal diameter of pipe `link` (diameter unit) to `*out`. Errors:
/// `RINGMAIN_WRONG_KIND`.
///
/// # Safety
/// `model` is NULL or a live model; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_get_pipe_diameter(
    model: *const ringmain_model,
    link: usize,
    out: *mut f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { get_one(model, Input::PipeDiameter, link, out) }
    }
}

// ---------------------------------------------------------------------------------------------
// Building a model
// ---------------------------------------------------------------------------------------------

/// Adds the node made by `make` (in SI) and writes its index to `out_index` (may be NULL).
unsafe fn add_node_with(
    model: *mut ringmain_model,
    id: *const c_char,
    out_index: *mut usize,
    make: impl FnOnce(String, &Units) -> Node,
) -> Result<(), Failure> {
    // SAFETY: forwarded from the exported functions' contracts.
    let (m, id, out_index) =
        unsafe { (handle_mut(model, "model")?, text(id, "id")?, out_opt(out_index, "out_index")?) };
    let node = make(id.to_owned(), &m.units());
    let index = m.add_node(node)?;
    if let Some(o) = out_index {
        o.write(index);
    }
    Ok(())
}

/// Adds the link made by `make` from `from` to `to` and writes its index to `out_index` (may be
/// NULL).
unsafe fn add_link_with(
    model: *mut ringmain_model,
    id: *const c_char,
    from: *const c_char,
    to: *const c_char,
    out_index: *mut usize,
    make: impl FnOnce(&str, &Units) -> Result<(LinkKind, LinkStatus), Failure>,
) -> Result<(), Failure> {
    // SAFETY: forwarded from the exported functions' contracts.
    let (m, id, from, to, out_index) = unsafe {
        (
            handle_mut(model, "model")?,
            text(id, "id")?,
            text(from, "from")?,
            text(to, "to")?,
            out_opt(out_index, "out_index")?,
        )
    };
    let (from, to) = (m.end(id, "from", from)?, m.end(id, "to", to)?);
    let (kind, status) = make(id, &m.units())?;
    let index = m.add_link(Link { id: id.into(), from, to, status, kind })?;
    if let Some(o) = out_index {
        o.write(index);
    }
    Ok(())
}

/// Adds a junction at `elevation` (length unit) drawing `demand` (flow unit; negative is an
/// inflow) and writes its index to `*out_index` (may be NULL).
///
/// Errors: `RINGMAIN_MODEL_INVALID` for a duplicate or empty id or a value that is not a finite
/// number (the last error names the node and key).
///
/// # Safety
/// `model` is NULL or a live model; `id` is NULL or a NUL-terminated string; `out_index` is NULL
/// or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_add_junction(
    model: *mut ringmain_model,
    id: *const c_char,
    elevation: f64,
    demand: f64,
    out_index: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe {
            add_node_with(model, id, out_index, |id, u| {
                Node::junction(id, u.to_si(Quantity::Length, elevation), u.to_si(Quantity::Flow, demand))
            })
        }
    }
}

/// Adds a reservoir with a fixed `head` (length unit; its elevation is the same) and writes its
/// index to `*out_index` (may be NULL). Errors as `ringmain_model_add_junction`.
///
/// # Safety
/// As `ringmain_model_add_junction`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_add_reservoir(
    model: *mut ringmain_model,
    id: *const c_char,
    head: f64,
    out_index: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { add_node_with(model, id, out_index, |id, u| Node::reservoir(id, u.to_si(Quantity::Length, head))) }
    }
}

/// Adds a tank with its floor at `elevation`, water `level` above the floor, and the lowest and
/// highest levels `min_level` and `max_level` (all length unit), of diameter `diameter` (length
/// unit). `max_level` and `diameter` may be NaN for "not given". In a snapshot the tank holds
/// the fixed head `elevation + level`. Writes its index to `*out_index` (may be NULL).
///
/// Errors as `ringmain_model_add_junction`, and a level outside `min_level`..`max_level`.
///
/// # Safety
/// As `ringmain_model_add_junction`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_add_tank(
    model: *mut ringmain_model,
    id: *const c_char,
    elevation: f64,
    level: f64,
    min_level: f64,
    max_level: f64,
    diameter: f64,
    out_index: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe {
            add_node_with(model, id, out_index, |id, u| Node {
                id: id.into(),
                elevation: u.to_si(Quantity::Length, elevation),
                coordinates: None,
                zone: None,
                kind: NodeKind::Tank(Box::new(Tank {
                    level: u.to_si(Quantity::Length, level),
                    min_level: u.to_si(Quantity::Length, min_level),
                    max_level: optional(max_level).map(|v| u.to_si(Quantity::Length, v)),
                    diameter: optional(diameter).map(|v| u.to_si(Quantity::Length, v)),
                })),
            })
        }
    }
}

/// Adds a pipe from node `from` to node `to` (ids) of `length` (length unit), internal
/// `diameter` (diameter unit), `roughness` (Hazen–Williams C, or absolute roughness in the
/// roughness unit under Darcy–Weisbach) and sum of minor-loss coefficients `minor_loss`; with
/// `check_valve` true it lets water flow only from `from` to `to`. Writes its index to
/// `*out_index` (may be NULL).
///
/// Errors: `RINGMAIN_NOT_FOUND` for an unknown end node; `RINGMAIN_MODEL_INVALID` for a duplicate
/// id or a value out of range (the last error names the link and key).
///
/// # Safety
/// `model` is NULL or a live model; `id`, `from`, `to` are NULL or NUL-terminated strings;
/// `out_index` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_add_pipe(
    model: *mut ringmain_model,
    id: *const c_char,
    from: *const c_char,
    to: *const c_char,
    length: f64,
    diameter: f64,
    roughness: f64,
    minor_loss: f64,
    check_valve: bool,
    out_index: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe {
            add_link_with(model, id, from, to, out_index, |_, u| {
                let pipe = Pipe {
                    length: u.to_si(Quantity::Length, length),
                    diameter: u.to_si(Quantity::Diameter, diameter),
                    roughness: u.to_si(Quantity::PipeRoughness, roughness),
                    minor_loss,
                    check_valve,
                };
                Ok((LinkKind::Pipe(pipe), LinkStatus::Open))
            })
        }
    }
}

fn pump(drive: PumpDrive, speed: f64) -> LinkKind {
    LinkKind::Pump(Box::new(Pump {
        drive,
        efficiency_points: None,
        efficiency: Efficiency::Constant(Efficiency::DEFAULT),
        speed,
        elevation: None,
        npsh_required: None,
    }))
}

/// Adds a pump from `from` (suction) to `to` (discharge) with a head curve through `n_points`
/// points (`flows[i]` in the flow unit, `heads[i]` in the length unit; flows increasing, heads
/// strictly decreasing), at relative `speed` (1 = the curve's speed, 0 = stopped). Efficiency
/// 75 % until set with `ringmain_model_set_pump_efficiency`. Writes its index to `*out_index`
/// (may be NULL).
///
/// Errors as `ringmain_model_add_pipe`; a curve that is not acceptable is
/// `RINGMAIN_MODEL_INVALID` naming the key `head_curve`.
///
/// # Safety
/// As `ringmain_model_add_pipe`; `flows` and `heads` are NULL or point to `n_points` doubles.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_add_pump_curve(
    model: *mut ringmain_model,
    id: *const c_char,
    from: *const c_char,
    to: *const c_char,
    flows: *const f64,
    heads: *const f64,
    n_points: usize,
    speed: f64,
    out_index: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (flows, heads) = unsafe { (slice(flows, n_points, "flows")?, slice(heads, n_points, "heads")?) };
        // SAFETY: the caller's contract above.
        unsafe {
            add_link_with(model, id, from, to, out_index, |id, u| {
                let points: Vec<(f64, f64)> =
                    flows.iter().zip(heads).map(|(&q, &h)| (u.to_si(Quantity::Flow, q), u.to_si(Quantity::Length, h))).collect();
                let curve = HeadCurve::fit(&points)
                    .map_err(|e| ModelError::at(Some(Element::Link(id.to_owned())), Some("head_curve"), e.0))?;
                Ok((pump(PumpDrive::Curve { points, curve }, speed), LinkStatus::Open))
            })
        }
    }
}

/// Adds a pump from `from` to `to` that delivers a constant hydraulic `power` (kW, or hp when
/// lengths are in feet) at relative `speed`. Writes its index to `*out_index` (may be NULL).
/// Errors as `ringmain_model_add_pipe`.
///
/// # Safety
/// As `ringmain_model_add_pipe`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_add_pump_power(
    model: *mut ringmain_model,
    id: *const c_char,
    from: *const c_char,
    to: *const c_char,
    power: f64,
    speed: f64,
    out_index: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe {
            add_link_with(model, id, from, to, out_index, |_, u| {
                Ok((pump(PumpDrive::Power(u.to_si(Quantity::Power, power)), speed), LinkStatus::Open))
            })
        }
    }
}

/// Adds a control valve from `from` to `to`: `valve_type` is a `ringmain_valve_type`,
/// `diameter` in the diameter unit, `setting` a pressure (pressure unit) for pressure-reducing
/// and pressure-sustaining valves, a flow (flow unit) for flow-control valves and the loss
/// coefficient K for throttle valves; `minor_loss` is its loss coefficient when fully open. It
/// starts regulating (`RINGMAIN_STATUS_AUTOMATIC`). Writes its index to `*out_index` (may be
/// NULL).
///
/// Errors as `ringmain_model_add_pipe`, and `RINGMAIN_INVALID_ARGUMENT` for a bad `valve_type`.
///
/// # Safety
/// As `ringmain_model_add_pipe`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_add_valve(
    model: *mut ringmain_model,
    id: *const c_char,
    from: *const c_char,
    to: *const c_char,
    valve_type: u32,
    diameter: f64,
    setting: f64,
    minor_loss: f64,
    out_index: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        let valve = ringmain_valve_type::from_code(valve_type, "valve_type")?.valve();
        // SAFETY: the caller's contract above.
        unsafe {
            add_link_with(model, id, from, to, out_index, |_, u| {
                let v = Valve {
                    valve,
                    diameter: u.to_si(Quantity::Diameter, diameter),
                    setting: u.to_si(valve.setting_quantity(), setting),
                    minor_loss,
                    automatic: true,
                };
                Ok((LinkKind::Valve(v), LinkStatus::Open))
            })
        }
    }
}

// ---------------------------------------------------------------------------------------------
// Changing values between solves
// ---------------------------------------------------------------------------------------------

/// Changes link `index` through `change` (which works on a copy in SI), then checks and stores it.
unsafe fn change_link(
    model: *mut ringmain_model,
    index: usize,
    change: impl FnOnce(&mut Link, &Units) -> Result<(), Failure>,
) -> Result<(), Failure> {
    // SAFETY: forwarded from the exported functions' contracts.
    let m = unsafe { handle_mut(model, "model") }?;
    let mut link = m.link(index)?.clone();
    change(&mut link, &m.units())?;
    m.model.replace_link(index, link)?;
    Ok(())
}

/// Sets the demand of junction `node` (flow unit). Errors: `RINGMAIN_WRONG_KIND` for a reservoir
/// or tank; `RINGMAIN_MODEL_INVALID` for a value that is not a finite number.
///
/// # Safety
/// `model` is NULL or a live model used by no other thread during the call.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_set_demand(
    model: *mut ringmain_model,
    node: usize,
    demand: f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { set_one(model, Input::Demand, node, demand) }
    }
}

/// Sets the fixed head of reservoir `node` (length unit). Errors: `RINGMAIN_WRONG_KIND`;
/// `RINGMAIN_MODEL_INVALID`.
///
/// # Safety
/// `model` is NULL or a live model used by no other thread during the call.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_set_reservoir_head(
    model: *mut ringmain_model,
    node: usize,
    head: f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { set_one(model, Input::ReservoirHead, node, head) }
    }
}

/// Sets the water level of tank `node` above its floor (length unit). Errors:
/// `RINGMAIN_WRONG_KIND`; `RINGMAIN_MODEL_INVALID` for a level outside its limits.
///
/// # Safety
/// `model` is NULL or a live model used by no other thread during the call.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_set_tank_level(
    model: *mut ringmain_model,
    node: usize,
    level: f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { set_one(model, Input::TankLevel, node, level) }
    }
}

/// Sets the status of link `link` (`status` is a `ringmain_link_status`): open, closed, or for a
/// valve also automatic (regulating by its setting); a valve set open is held fully open.
///
/// Errors: `RINGMAIN_INVALID_ARGUMENT` for an integer that names no status, or automatic for a
/// pipe or pump.
///
/// # Safety
/// `model` is NULL or a live model used by no other thread during the call.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_set_link_status(
    model: *mut ringmain_model,
    link: usize,
    status: u32,
) -> ringmain_status {
    ffi_boundary! {
        let status = ringmain_link_status::from_code(status, "status")?;
        // SAFETY: the caller's contract above.
        let m = unsafe { handle_mut(model, "model") }?;
        m.set_link_status(link, status)
    }
}

/// Sets the relative speed of pump `link` (1 = the speed of its curve, 0 = stopped). Errors:
/// `RINGMAIN_WRONG_KIND`; `RINGMAIN_MODEL_INVALID` for a negative or non-finite speed.
///
/// # Safety
/// `model` is NULL or a live model used by no other thread during the call.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_set_pump_speed(
    model: *mut ringmain_model,
    link: usize,
    speed: f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { set_one(model, Input::PumpSpeed, link, speed) }
    }
}

/// Sets the constant efficiency of pump `link`, in percent (above 0, at most 100), used for its
/// shaft power. Errors: `RINGMAIN_WRONG_KIND`; `RINGMAIN_MODEL_INVALID`.
///
/// # Safety
/// `model` is NULL or a live model used by no other thread during the call.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_set_pump_efficiency(
    model: *mut ringmain_model,
    link: usize,
    percent: f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe {
            change_link(model, link, |l, _| match &mut l.kind {
                LinkKind::Pump(p) => {
                    p.efficiency_points = None;
                    p.efficiency = Efficiency::Constant(percent / 100.0);
                    Ok(())
                }
                other => Err(wrong_kind(Element::Link(l.id.to_string()), "efficiency", "pumps", other.label())),
            })
        }
    }
}

/// Sets the efficiency curve of pump `link` through `n_points` points (`flows[i]` in the flow
/// unit, `percents[i]` in percent). Errors: `RINGMAIN_WRONG_KIND`; `RINGMAIN_MODEL_INVALID`
/// naming the key `efficiency_curve`.
///
/// # Safety
/// `model` is NULL or a live model used by no other thread during the call; `flows` and
/// `percents` are NULL or point to `n_points` doubles.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_set_pump_efficiency_curve(
    model: *mut ringmain_model,
    link: usize,
    flows: *const f64,
    percents: *const f64,
    n_points: usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (flows, percents) =
            unsafe { (slice(flows, n_points, "flows")?, slice(percents, n_points, "percents")?) };
        // SAFETY: the caller's contract above.
        unsafe {
            change_link(model, link, |l, u| match &mut l.kind {
                LinkKind::Pump(p) => {
                    let points: Vec<(f64, f64)> =
                        flows.iter().zip(percents).map(|(&q, &e)| (u.to_si(Quantity::Flow, q), e / 100.0)).collect();
                    p.efficiency = Efficiency::fit(&points).map_err(|e| {
                        ModelError::at(Some(Element::Link(l.id.to_string())), Some("efficiency_curve"), e.0)
                    })?;
                    p.efficiency_points = Some(points);
                    Ok(())
                }
                other => Err(wrong_kind(Element::Link(l.id.to_string()), "efficiency_curve", "pumps", other.label())),
            })
        }
    }
}

/// Sets the setting of valve `link`, in the unit its type takes (see
/// `ringmain_model_get_valve_setting`). Errors: `RINGMAIN_WRONG_KIND`; `RINGMAIN_MODEL_INVALID`.
///
/// # Safety
/// `model` is NULL or a live model used by no other thread during the call.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_set_valve_setting(
    model: *mut ringmain_model,
    link: usize,
    setting: f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { set_one(model, Input::ValveSetting, link, setting) }
    }
}

/// Sets the roughness of pipe `link` (Hazen–Williams C, or absolute roughness in the roughness
/// unit under Darcy–Weisbach). Errors: `RINGMAIN_WRONG_KIND`; `RINGMAIN_MODEL_INVALID`.
///
/// # Safety
/// `model` is NULL or a live model used by no other thread during the call.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_set_pipe_roughness(
    model: *mut ringmain_model,
    link: usize,
    roughness: f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { set_one(model, Input::PipeRoughness, link, roughness) }
    }
}

/// Sets the internal diameter of pipe `link` (diameter unit). Errors: `RINGMAIN_WRONG_KIND`;
/// `RINGMAIN_MODEL_INVALID`.
///
/// # Safety
/// `model` is NULL or a live model used by no other thread during the call.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_set_pipe_diameter(
    model: *mut ringmain_model,
    link: usize,
    diameter: f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { set_one(model, Input::PipeDiameter, link, diameter) }
    }
}

/// Sets the water temperature, °C (0 to 99), which sets the water's density and viscosity.
/// Pressures given in kPa, bar or psi afterwards are converted with the new density.
/// Errors: `RINGMAIN_MODEL_INVALID` naming `[hydraulics]` and `water_temperature`.
///
/// # Safety
/// `model` is NULL or a live model used by no other thread during the call.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_set_water_temperature(
    model: *mut ringmain_model,
    celsius: f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let m = unsafe { handle_mut(model, "model") }?;
        if !(WaterProperties::MIN_CELSIUS..=WaterProperties::MAX_CELSIUS).contains(&celsius) {
            return Err(ModelError::at(
                Some(Element::Table("hydraulics".into())),
                Some("water_temperature"),
                format!(
                    "must be between {} and {} deg C, found {celsius}",
                    WaterProperties::MIN_CELSIUS,
                    WaterProperties::MAX_CELSIUS
                ),
            )
            .into());
        }
        m.model.options.water = WaterSpec::Temperature(celsius);
        Ok(())
    }
}

/// Sets the solver's iteration limit (1 to 100000), head tolerance (length unit, above zero) and
/// relative flow tolerance (above zero) for the next solves. Errors: `RINGMAIN_MODEL_INVALID`
/// naming `[hydraulics]` and the key.
///
/// # Safety
/// `model` is NULL or a live model used by no other thread during the call.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_set_solver_options(
    model: *mut ringmain_model,
    max_iterations: u32,
    head_tolerance: f64,
    flow_tolerance: f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let m = unsafe { handle_mut(model, "model") }?;
        let table = || Some(Element::Table("hydraulics".into()));
        if !(1..=100_000).contains(&max_iterations) {
            let message = format!("must be between 1 and 100000, found {max_iterations}");
            return Err(ModelError::at(table(), Some("max_iterations"), message).into());
        }
        for (key, v) in [("head_tolerance", head_tolerance), ("flow_tolerance", flow_tolerance)] {
            if !(v.is_finite() && v > 0.0) {
                return Err(ModelError::at(table(), Some(key), format!("must be a number above zero, found {v}")).into());
            }
        }
        let u = m.units();
        m.model.options.max_iterations = max_iterations;
        m.model.options.head_tolerance = u.to_si(Quantity::Length, head_tolerance);
        m.model.options.flow_tolerance = flow_tolerance;
        Ok(())
    }
}

/// With `enabled` true, each solve starts from the flows of the model's previous successful
/// solve instead of the standard initial flows: fewer iterations in loops of similar scenarios.
/// Off by default.
///
/// # Safety
/// `model` is NULL or a live model used by no other thread during the call.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_set_warm_start(model: *mut ringmain_model, enabled: bool) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let m = unsafe { handle_mut(model, "model") }?;
        m.warm_start = enabled;
        Ok(())
    }
}

// ---------------------------------------------------------------------------------------------
// Solving
// ---------------------------------------------------------------------------------------------

/// Solves a snapshot of the model and writes a new results handle to `*out` (free it with
/// `ringmain_results_free`). The analysis of the network is kept in the model and reused by the
/// next solve; it is redone by itself when nodes or links were added.
///
/// Errors: `RINGMAIN_MODEL_INVALID` when the model fails its checks; `RINGMAIN_NOT_CONVERGED`
/// when the iteration limit was reached (the last error gives the iterations, the last changes
/// and the elements still moving most); `RINGMAIN_SOLVE_FAILED` otherwise. No results then.
///
/// # Safety
/// `model` is NULL or a live model used by no other thread during the call; `out` is NULL or
/// writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_solve(
    model: *mut ringmain_model,
    out: *mut *mut ringmain_results,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, out) = unsafe { (handle_mut(model, "model")?, self::out(out, "out")?) };
        let results = m.solve()?;
        out.write(into_handle(results, &LIVE_RESULTS));
        Ok(())
    }
}
