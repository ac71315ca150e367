//! The results handle: one solved snapshot, in the units of the model it was solved from.

use crate::boundary::{copy_out, copy_text, free_handle, handle, out, out_opt, text, Failure, LIVE_RESULTS};
use crate::codes::*;
use crate::convert::Quantity;
use crate::model::{out_of_range, Ids};
use ringmain_core::{Model, Solution};
use std::ffi::{c_char, CString};
use std::sync::{Arc, OnceLock};

/// The results of one solve: heads, pressures, demands, flows, velocities, head losses and link
/// states, solver statistics and warnings, all in the units of the model at the time it was solved.
///
/// Made by `ringmain_model_solve`; owned by the caller, who frees it with `ringmain_results_free`
/// (once). It does not refer to the model: it stays valid and unchanged when the model changes or
/// is freed. Node and link indices are those of the model when it was solved.
///
/// Threads: results are never changed after they are made, so any number of threads may read the
/// same results at the same time; they may be freed only when no thread uses them any more.
pub struct ringmain_results {
    ids: Arc<Ids>,
    head: Vec<f64>,
    pressure: Vec<f64>,
    demand: Vec<f64>,
    flow: Vec<f64>,
    velocity: Vec<f64>,
    headloss: Vec<f64>,
    state: Vec<u32>,
    connected: Vec<bool>,
    iterations: u32,
    status_changes: u32,
    max_mass_residual: f64,
    max_energy_residual: f64,
    last_head_change: f64,
    last_flow_change: f64,
    warnings: Vec<String>,
    pumps: Vec<PumpOut>,
}

/// One pump's results in the model's units.
#[derive(Clone, Copy, Debug)]
struct PumpOut {
    link: usize,
    head: f64,
    hydraulic_power: f64,
    shaft_power: f64,
    efficiency_percent: f64,
}

impl ringmain_results {
    pub(crate) fn new(model: &Model, s: &Solution, ids: Arc<Ids>) -> Self {
        let u = model.converter();
        let map = |v: &[f64], q: Quantity| v.iter().map(|&x| u.from_si(q, x)).collect::<Vec<f64>>();
        ringmain_results {
            ids,
            head: map(&s.head, Quantity::Length),
            pressure: map(&s.pressure, Quantity::Pressure),
            demand: map(&s.demand, Quantity::Flow),
            flow: map(&s.flow, Quantity::Flow),
            velocity: map(&s.velocity, Quantity::Length),
            // As the command-line program reports it: pumps signed, H_from − H_to (a head gain is a
            // negative loss), every other link |H_from − H_to|.
            headloss: model
                .links()
                .iter()
                .zip(&s.headloss)
                .map(|(l, &h)| {
                    if l.as_pump().is_some() {
                        u.from_si(Quantity::Length, s.head[l.from] - s.head[l.to])
                    } else {
                        u.from_si(Quantity::Length, h)
                    }
                })
                .collect(),
            state: s.link_state.iter().map(|&st| ringmain_link_state::of(st) as u32).collect(),
            connected: s.connected.clone(),
            iterations: s.iterations,
            status_changes: s.status_changes,
            max_mass_residual: u.from_si(Quantity::Flow, s.max_mass_residual),
            max_energy_residual: u.from_si(Quantity::Length, s.max_energy_residual),
            last_head_change: u.from_si(Quantity::Length, s.last_head_change),
            last_flow_change: s.last_flow_change,
            warnings: s.warnings.iter().map(|w| w.to_string()).collect(),
            pumps: s
                .pumps
                .iter()
                .map(|p| PumpOut {
                    link: p.link,
                    head: u.from_si(Quantity::Length, p.head),
                    hydraulic_power: u.from_si(Quantity::Power, p.hydraulic_power),
                    shaft_power: u.from_si(Quantity::Power, p.shaft_power),
                    efficiency_percent: p.efficiency * 100.0,
                })
                .collect(),
        }
    }

    fn node_checked(&self, index: usize) -> Result<usize, Failure> {
        if index < self.ids.nodes.len() {
            Ok(index)
        } else {
            Err(out_of_range("node", index, self.ids.nodes.len()))
        }
    }

    fn link_checked(&self, index: usize) -> Result<usize, Failure> {
        if index < self.ids.links.len() {
            Ok(index)
        } else {
            Err(out_of_range("link", index, self.ids.links.len()))
        }
    }

    fn pump(&self, link: usize) -> Result<&PumpOut, Failure> {
        let k = self.link_checked(link)?;
        self.pumps.iter().find(|p| p.link == k).ok_or_else(|| {
            Failure::wrong_kind(format!(
                "link '{}': pump results apply to pumps only",
                ringmain_core::error::printable(&self.ids.links[k])
            ))
        })
    }
}

/// Frees results. NULL is ignored.
///
/// # Safety
/// `results` is NULL or live results, not used again afterwards.
#[no_mangle]
pub unsafe extern "C" fn ringmain_results_free(results: *mut ringmain_results) {
    // A free function cannot report failure; a panic while dropping is caught and ignored.
    let _ = ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { free_handle(results, &LIVE_RESULTS) };
        Ok(())
    };
}

/// Writes one statistic of the results.
unsafe fn statistic<T>(
    results: *const ringmain_results,
    out: *mut T,
    value: impl FnOnce(&ringmain_results) -> T,
) -> Result<(), Failure> {
    // SAFETY: forwarded from the exported functions' contracts.
    let (r, out) = unsafe { (handle(results, "results")?, self::out(out, "out")?) };
    out.write(value(r));
    Ok(())
}

/// Writes the number of nodes of the solved model to `*out`.
///
/// # Safety
/// `results` is NULL or live results; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_node_count(
    results: *const ringmain_results,
    out: *mut usize,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { statistic(results, out, |r| r.ids.nodes.len()) } }
}

/// Writes the number of links of the solved model to `*out`.
///
/// # Safety
/// `results` is NULL or live results; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_link_count(
    results: *const ringmain_results,
    out: *mut usize,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { statistic(results, out, |r| r.ids.links.len()) } }
}

/// Writes the index of node `id` in these results to `*out`. Errors: `RINGMAIN_NOT_FOUND`.
///
/// # Safety
/// `results` is NULL or live results; `id` is NULL or a NUL-terminated string; `out` is NULL or
/// writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_node_index(
    results: *const ringmain_results,
    id: *const c_char,
    out: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (r, id, out) = unsafe { (handle(results, "results")?, text(id, "id")?, self::out(out, "out")?) };
        out.write(r.ids.find_node(id)?);
        Ok(())
    }
}

/// Writes the index of link `id` in these results to `*out`. Errors: `RINGMAIN_NOT_FOUND`.
///
/// # Safety
/// As `ringmain_results_node_index`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_link_index(
    results: *const ringmain_results,
    id: *const c_char,
    out: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (r, id, out) = unsafe { (handle(results, "results")?, text(id, "id")?, self::out(out, "out")?) };
        out.write(r.ids.find_link(id)?);
        Ok(())
    }
}

/// Writes the number of Newton iterations (linear solves) of the solve to `*out`.
///
/// # Safety
/// `results` is NULL or live results; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_iterations(
    results: *const ringmain_results,
    out: *mut u32,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { statistic(results, out, |r| r.iterations) } }
}

/// Writes the number of device state changes (check valves, pumps, control valves) made during
/// the solve to `*out`.
///
/// # Safety
/// `results` is NULL or live results; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_status_changes(
    results: *const ringmain_results,
    out: *mut u32,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { statistic(results, out, |r| r.status_changes) } }
}

/// Writes the largest mass-balance residual over connected junctions (flow unit) to `*mass` and
/// the largest energy-equation residual over open links (length unit) to `*energy`.
///
/// # Safety
/// `results` is NULL or live results; `mass` and `energy` are NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_residuals(
    results: *const ringmain_results,
    mass: *mut f64,
    energy: *mut f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (r, mass, energy) = unsafe { (handle(results, "results")?, out(mass, "mass")?, out(energy, "energy")?) };
        mass.write(r.max_mass_residual);
        energy.write(r.max_energy_residual);
        Ok(())
    }
}

/// Writes the largest head change of the last iteration (length unit) to `*head_change` and its
/// relative flow change (sum of |ΔQ| over sum of |Q|) to `*flow_change`.
///
/// # Safety
/// `results` is NULL or live results; `head_change` and `flow_change` are NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_last_changes(
    results: *const ringmain_results,
    head_change: *mut f64,
    flow_change: *mut f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (r, h, q) = unsafe {
            (handle(results, "results")?, out(head_change, "head_change")?, out(flow_change, "flow_change")?)
        };
        h.write(r.last_head_change);
        q.write(r.last_flow_change);
        Ok(())
    }
}

/// Copies one of the result arrays into the caller's buffer.
unsafe fn array<T: Copy>(
    results: *const ringmain_results,
    buf: *mut T,
    len: usize,
    count: *mut usize,
    what: &str,
    values: impl FnOnce(&ringmain_results) -> &[T],
) -> Result<(), Failure> {
    // SAFETY: forwarded from the exported functions' contracts.
    let (r, count) = unsafe { (handle(results, "results")?, out_opt(count, "count")?) };
    // SAFETY: forwarded from the exported functions' contracts.
    unsafe { copy_out(values(r), buf, len, count, what) }
}

/// Copies the head of every node (length unit; NaN for a node cut off from every reservoir and
/// tank) into `buf`, which holds `len` doubles, in node order, and writes the number of nodes to
/// `*count` (may be NULL). When `len` is less than the number of nodes nothing is copied, `*count`
/// gets the number needed and the call returns `RINGMAIN_BUFFER_TOO_SMALL`. The other array
/// functions work the same way.
///
/// # Safety
/// `results` is NULL or live results; `buf` is NULL or `len` writable elements; `count` is NULL
/// or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_heads(
    results: *const ringmain_results,
    buf: *mut f64,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { array(results, buf, len, count, "heads", |r| &r.head) } }
}

/// Copies the pressure of every node (pressure unit; NaN where cut off) into `buf`, as
/// `ringmain_results_heads`.
///
/// # Safety
/// As `ringmain_results_heads`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_pressures(
    results: *const ringmain_results,
    buf: *mut f64,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { array(results, buf, len, count, "pressures", |r| &r.pressure) } }
}

/// Copies the demand of every node (flow unit; zero for reservoirs and tanks) into `buf`, as
/// `ringmain_results_heads`.
///
/// # Safety
/// As `ringmain_results_heads`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_demands(
    results: *const ringmain_results,
    buf: *mut f64,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { array(results, buf, len, count, "demands", |r| &r.demand) } }
}

/// Copies, for every node, whether an open path joins it to a reservoir or tank into `buf`, as
/// `ringmain_results_heads`.
///
/// # Safety
/// As `ringmain_results_heads`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_connected(
    results: *const ringmain_results,
    buf: *mut bool,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { array(results, buf, len, count, "connected flags", |r| &r.connected) } }
}

/// Copies the flow of every link (flow unit; positive from its `from` node to its `to` node) into
/// `buf`, in link order, as `ringmain_results_heads`.
///
/// # Safety
/// As `ringmain_results_heads`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_flows(
    results: *const ringmain_results,
    buf: *mut f64,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { array(results, buf, len, count, "flows", |r| &r.flow) } }
}

/// Copies the mean velocity of every link (length unit per second, the sign of the flow; zero for
/// pumps) into `buf`, as `ringmain_results_heads`.
///
/// # Safety
/// As `ringmain_results_heads`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_velocities(
    results: *const ringmain_results,
    buf: *mut f64,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { array(results, buf, len, count, "velocities", |r| &r.velocity) } }
}

/// Copies the head difference across every link (length unit; |H_from − H_to|, for a closed link
/// the difference it holds; for a pump signed, H_from − H_to, negative where it lifts the water;
/// NaN when an end is cut off) into `buf`, as `ringmain_results_heads`.
///
/// # Safety
/// As `ringmain_results_heads`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_headlosses(
    results: *const ringmain_results,
    buf: *mut f64,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { array(results, buf, len, count, "head losses", |r| &r.headloss) } }
}

/// Copies the state of every link (a `ringmain_link_state` each) into `buf`, as
/// `ringmain_results_heads`.
///
/// # Safety
/// As `ringmain_results_heads`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_link_states(
    results: *const ringmain_results,
    buf: *mut u32,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { array(results, buf, len, count, "link states", |r| &r.state) } }
}

/// Writes one value of node `index` (shared body of the node getters).
unsafe fn node_value(
    results: *const ringmain_results,
    index: usize,
    out: *mut f64,
    values: impl FnOnce(&ringmain_results) -> &[f64],
) -> Result<(), Failure> {
    // SAFETY: forwarded from the exported functions' contracts.
    let (r, out) = unsafe { (handle(results, "results")?, self::out(out, "out")?) };
    let i = r.node_checked(index)?;
    out.write(values(r)[i]);
    Ok(())
}

/// Writes one value of link `index` (shared body of the link getters).
unsafe fn link_value<T: Copy>(
    results: *const ringmain_results,
    index: usize,
    out: *mut T,
    values: impl FnOnce(&ringmain_results) -> &[T],
) -> Result<(), Failure> {
    // SAFETY: forwarded from the exported functions' contracts.
    let (r, out) = unsafe { (handle(results, "results")?, self::out(out, "out")?) };
    let k = r.link_checked(index)?;
    out.write(values(r)[k]);
    Ok(())
}

/// Writes the head of node `node` (length unit) to `*out`. Errors: `RINGMAIN_OUT_OF_RANGE`.
///
/// # Safety
/// `results` is NULL or live results; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_node_head(
    results: *const ringmain_results,
    node: usize,
    out: *mut f64,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { node_value(results, node, out, |r| &r.head) } }
}

/// Writes the pressure of node `node` (pressure unit) to `*out`. Errors: `RINGMAIN_OUT_OF_RANGE`.
///
/// # Safety
/// As `ringmain_results_node_head`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_node_pressure(
    results: *const ringmain_results,
    node: usize,
    out: *mut f64,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { node_value(results, node, out, |r| &r.pressure) } }
}

/// Writes the demand of node `node` (flow unit) to `*out`. Errors: `RINGMAIN_OUT_OF_RANGE`.
///
/// # Safety
/// As `ringmain_results_node_head`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_node_demand(
    results: *const ringmain_results,
    node: usize,
    out: *mut f64,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { node_value(results, node, out, |r| &r.demand) } }
}

/// Writes the flow of link `link` (flow unit) to `*out`. Errors: `RINGMAIN_OUT_OF_RANGE`.
///
/// # Safety
/// As `ringmain_results_node_head`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_link_flow(
    results: *const ringmain_results,
    link: usize,
    out: *mut f64,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { link_value(results, link, out, |r| &r.flow) } }
}

/// Writes the velocity of link `link` (length unit per second) to `*out`. Errors:
/// `RINGMAIN_OUT_OF_RANGE`.
///
/// # Safety
/// As `ringmain_results_node_head`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_link_velocity(
    results: *const ringmain_results,
    link: usize,
    out: *mut f64,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { link_value(results, link, out, |r| &r.velocity) } }
}

/// Writes the head difference across link `link` (length unit; for a pump signed, H_from − H_to,
/// as `ringmain_results_headlosses`) to `*out`. Errors: `RINGMAIN_OUT_OF_RANGE`.
///
/// # Safety
/// As `ringmain_results_node_head`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_link_headloss(
    results: *const ringmain_results,
    link: usize,
    out: *mut f64,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { link_value(results, link, out, |r| &r.headloss) } }
}

/// Writes the state of link `link` (a `ringmain_link_state`) to `*out`. Errors:
/// `RINGMAIN_OUT_OF_RANGE`.
///
/// # Safety
/// `results` is NULL or live results; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_link_state(
    results: *const ringmain_results,
    link: usize,
    out: *mut u32,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { link_value(results, link, out, |r| &r.state) } }
}

/// Writes the head added by pump `link` (length unit; zero when it does not run) to `*out`.
/// Errors: `RINGMAIN_OUT_OF_RANGE`; `RINGMAIN_WRONG_KIND` for a link that is not a pump.
///
/// # Safety
/// `results` is NULL or live results; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_pump_head(
    results: *const ringmain_results,
    link: usize,
    out: *mut f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (r, out) = unsafe { (handle(results, "results")?, self::out(out, "out")?) };
        out.write(r.pump(link)?.head);
        Ok(())
    }
}

/// Writes the hydraulic power (ρ g Q H) and the shaft power (hydraulic power over efficiency) of
/// pump `link` (kW, or hp when lengths are in feet) to `*hydraulic` and `*shaft`, and the
/// efficiency used (percent) to `*efficiency`. Errors as `ringmain_results_pump_head`.
///
/// # Safety
/// `results` is NULL or live results; `hydraulic`, `shaft` and `efficiency` are NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_pump_power(
    results: *const ringmain_results,
    link: usize,
    hydraulic: *mut f64,
    shaft: *mut f64,
    efficiency: *mut f64,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (r, hydraulic, shaft, efficiency) = unsafe {
            (
                handle(results, "results")?,
                out(hydraulic, "hydraulic")?,
                out(shaft, "shaft")?,
                out(efficiency, "efficiency")?,
            )
        };
        let p = r.pump(link)?;
        hydraulic.write(p.hydraulic_power);
        shaft.write(p.shaft_power);
        efficiency.write(p.efficiency_percent);
        Ok(())
    }
}

/// Writes the number of warnings (things an engineer should look at: nodes cut off, negative
/// pressures, pumps past their curve) to `*out`.
///
/// # Safety
/// `results` is NULL or live results; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_warning_count(
    results: *const ringmain_results,
    out: *mut usize,
) -> ringmain_status {
    // SAFETY: the caller's contract above.
    ffi_boundary! { unsafe { statistic(results, out, |r| r.warnings.len()) } }
}

/// Copies warning `index` (naming the element, as the command-line program prints it) into `buf`
/// (`len` bytes, NUL-terminated); its size, NUL included, goes to `needed` (may be NULL).
/// `RINGMAIN_BUFFER_TOO_SMALL` writes only `needed`.
///
/// # Safety
/// `results` is NULL or live results; `buf` is NULL or `len` writable bytes; `needed` is NULL or
/// writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_results_warning(
    results: *const ringmain_results,
    index: usize,
    buf: *mut c_char,
    len: usize,
    needed: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (r, needed) = unsafe { (handle(results, "results")?, out_opt(needed, "needed")?) };
        let w = r.warnings.get(index).ok_or_else(|| out_of_range("warning", index, r.warnings.len()))?;
        // SAFETY: the caller's contract above.
        unsafe { copy_text(w, buf, len, needed) }
    }
}

/// Status word and reason of every link state, in the order of `ringmain_link_state::ALL`.
fn state_texts() -> &'static [(CString, CString)] {
    static TEXTS: OnceLock<Vec<(CString, CString)>> = OnceLock::new();
    TEXTS.get_or_init(|| {
        let c = |s: &str| CString::new(s).unwrap_or_default();
        ringmain_link_state::ALL
            .iter()
            .map(|s| match s.state() {
                Some(st) => (c(st.status_label()), c(st.reason().unwrap_or(""))),
                None => (c("unknown"), c("a state this version of the interface does not name")),
            })
            .collect()
    })
}

/// Writes the text of a link state (`state` is a `ringmain_link_state`): its status word
/// ("open", "closed" or "active", as in the command-line program's results) to `*status`, and why
/// the link is in it (empty when the word says all) to `*reason`. Either output may be NULL. The
/// strings are static: they live as long as the program and must not be freed.
///
/// Errors: `RINGMAIN_INVALID_ARGUMENT` for an integer that names no state.
///
/// # Safety
/// `status` and `reason` are NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_link_state_text(
    state: u32,
    status: *mut *const c_char,
    reason: *mut *const c_char,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (status, reason) = unsafe { (out_opt(status, "status")?, out_opt(reason, "reason")?) };
        let code = ringmain_link_state::from_code(state, "state")?;
        let i = ringmain_link_state::ALL.iter().position(|s| *s == code).unwrap_or(0);
        let (word, why) = &state_texts()[i];
        if let Some(s) = status {
            s.write(word.as_ptr());
        }
        if let Some(r) = reason {
            r.write(why.as_ptr());
        }
        Ok(())
    }
}
