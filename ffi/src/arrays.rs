//! Whole arrays across the boundary: every demand, status, setting, speed, roughness or diameter
//! of a model set from one buffer, and every id, kind, end, elevation, coordinate and zone read in
//! one call.
//!
//! Value arrays have one entry per node (demands) or per link (the rest), in index order. An
//! entry for an element the quantity does not apply to (a reservoir in the demands, a pipe in
//! the pump speeds) is NaN: the getters write NaN there, and the setters skip NaN entries
//! (so a NaN also leaves an element of the right kind unchanged) and refuse a number there with
//! `RINGMAIN_WRONG_KIND`. A setter changes all the values or none: on any error the model is as
//! it was. The values set are the solver's input, kept beside the model (see the `inputs`
//! module): one generic path serves every quantity, and setting them costs no copy of the model.
//!
//! Text arrays (ids, zones) are written back to back into one buffer, each NUL-terminated, in
//! index order; the size output counts every byte, NULs included.

use crate::boundary::{copy_out, handle, handle_mut, out_opt, slice, Failure, Out};
use crate::codes::*;
use crate::convert::Quantity;
use crate::inputs::{get_all, set_all, Input};
use crate::model::ringmain_model;
use ringmain_core::Node;
use std::ffi::c_char;
use std::ptr::NonNull;

/// Writes one value of every node (NaN where `get` gives none) into the caller's buffer.
unsafe fn get_node_values(
    model: *const ringmain_model,
    buf: *mut f64,
    len: usize,
    count: *mut usize,
    what: &str,
    get: impl Fn(&Node, &crate::convert::Units) -> Option<f64>,
) -> Result<(), Failure> {
    // SAFETY: forwarded from the exported functions' contracts.
    let (m, count) = unsafe { (handle(model, "model")?, out_opt(count, "count")?) };
    let n = m.model.nodes().len();
    if len < n {
        // SAFETY: forwarded; copy_out reports the size needed without copying.
        return unsafe { copy_out(&vec![0.0; n], buf, len, count, what) };
    }
    let u = m.units();
    let values: Vec<f64> = m.model.nodes().iter().map(|node| get(node, &u).unwrap_or(f64::NAN)).collect();
    // SAFETY: forwarded.
    unsafe { copy_out(&values, buf, len, count, what) }
}

/// Sets the demand of every junction from `values` (`len` = the number of nodes, flow unit; NaN
/// for reservoirs and tanks, and for junctions to leave unchanged).
///
/// Errors: `RINGMAIN_OUT_OF_RANGE` when `len` is not the number of nodes; `RINGMAIN_WRONG_KIND`
/// for a number at a reservoir or tank; `RINGMAIN_MODEL_INVALID` for an infinite value (the last
/// error names the node and key). Nothing is changed on error.
///
/// # Safety
/// `model` is NULL or a live model used by no other thread during the call; `values` is NULL or
/// points to `len` doubles.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_set_demands(
    model: *mut ringmain_model,
    values: *const f64,
    len: usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { set_all(model, Input::Demand, values, len) }
    }
}

/// Writes the demand of every node (flow unit; NaN for reservoirs and tanks) into `buf` (`len`
/// doubles) and the number of nodes to `count` (may be NULL). Returns
/// `RINGMAIN_BUFFER_TOO_SMALL` (writing only `count`) when `len` is too small.
///
/// # Safety
/// `model` is NULL or a live model; `buf` is NULL or `len` writable doubles; `count` is NULL or
/// writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_get_demands(
    model: *const ringmain_model,
    buf: *mut f64,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { get_all(model, Input::Demand, buf, len, count, "demands") }
    }
}

/// Sets the fixed head of every reservoir from `values` (`len` = the number of nodes, length
/// unit; NaN for junctions and tanks, and for reservoirs to leave unchanged). Errors as
/// `ringmain_model_set_demands`.
///
/// # Safety
/// As `ringmain_model_set_demands`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_set_reservoir_heads(
    model: *mut ringmain_model,
    values: *const f64,
    len: usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { set_all(model, Input::ReservoirHead, values, len) }
    }
}

/// Writes the fixed head of every node (length unit; NaN for junctions and tanks). Buffer rules
/// as `ringmain_model_get_demands`.
///
/// # Safety
/// As `ringmain_model_get_demands`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_get_reservoir_heads(
    model: *const ringmain_model,
    buf: *mut f64,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { get_all(model, Input::ReservoirHead, buf, len, count, "reservoir heads") }
    }
}

/// Sets the relative speed of every pump from `values` (`len` = the number of links; NaN for
/// pipes and valves, and for pumps to leave unchanged). Errors as `ringmain_model_set_demands`
/// (a negative speed is `RINGMAIN_MODEL_INVALID`).
///
/// # Safety
/// As `ringmain_model_set_demands`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_set_pump_speeds(
    model: *mut ringmain_model,
    values: *const f64,
    len: usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { set_all(model, Input::PumpSpeed, values, len) }
    }
}

/// Writes the relative speed of every link (NaN for pipes and valves). Buffer rules as
/// `ringmain_model_get_demands`, with one value per link.
///
/// # Safety
/// As `ringmain_model_get_demands`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_get_pump_speeds(
    model: *const ringmain_model,
    buf: *mut f64,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { get_all(model, Input::PumpSpeed, buf, len, count, "pump speeds") }
    }
}

/// Sets the setting of every valve from `values` (`len` = the number of links, each in the unit
/// its valve type takes, see `ringmain_model_get_valve_setting`; NaN for pipes and pumps, and for
/// valves to leave unchanged). Errors as `ringmain_model_set_demands`.
///
/// # Safety
/// As `ringmain_model_set_demands`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_set_valve_settings(
    model: *mut ringmain_model,
    values: *const f64,
    len: usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { set_all(model, Input::ValveSetting, values, len) }
    }
}

/// Writes the setting of every link (NaN for pipes and pumps). Buffer rules as
/// `ringmain_model_get_demands`, with one value per link.
///
/// # Safety
/// As `ringmain_model_get_demands`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_get_valve_settings(
    model: *const ringmain_model,
    buf: *mut f64,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { get_all(model, Input::ValveSetting, buf, len, count, "valve settings") }
    }
}

/// Sets the roughness of every pipe from `values` (`len` = the number of links; Hazen–Williams C,
/// or absolute roughness in the roughness unit under Darcy–Weisbach; NaN for pumps and valves,
/// and for pipes to leave unchanged). Errors as `ringmain_model_set_demands`.
///
/// # Safety
/// As `ringmain_model_set_demands`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_set_pipe_roughnesses(
    model: *mut ringmain_model,
    values: *const f64,
    len: usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { set_all(model, Input::PipeRoughness, values, len) }
    }
}

/// Writes the roughness of every link (NaN for pumps and valves). Buffer rules as
/// `ringmain_model_get_demands`, with one value per link.
///
/// # Safety
/// As `ringmain_model_get_demands`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_get_pipe_roughnesses(
    model: *const ringmain_model,
    buf: *mut f64,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { get_all(model, Input::PipeRoughness, buf, len, count, "pipe roughnesses") }
    }
}

/// Sets the internal diameter of every pipe from `values` (`len` = the number of links, diameter
/// unit; NaN for pumps and valves, and for pipes to leave unchanged). Errors as
/// `ringmain_model_set_demands`.
///
/// # Safety
/// As `ringmain_model_set_demands`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_set_pipe_diameters(
    model: *mut ringmain_model,
    values: *const f64,
    len: usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { set_all(model, Input::PipeDiameter, values, len) }
    }
}

/// Writes the internal diameter of every link (diameter unit; NaN for pumps and valves). Buffer
/// rules as `ringmain_model_get_demands`, with one value per link.
///
/// # Safety
/// As `ringmain_model_get_demands`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_get_pipe_diameters(
    model: *const ringmain_model,
    buf: *mut f64,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { get_all(model, Input::PipeDiameter, buf, len, count, "pipe diameters") }
    }
}

/// Sets the status of every link from `statuses` (`len` = the number of links, each a
/// `ringmain_link_status`: open, closed, or for valves automatic). All or none.
///
/// Errors: `RINGMAIN_OUT_OF_RANGE` when `len` is not the number of links;
/// `RINGMAIN_INVALID_ARGUMENT` for an integer that names no status, or automatic for a pipe or
/// pump (the last error names the link).
///
/// # Safety
/// `model` is NULL or a live model used by no other thread during the call; `statuses` is NULL or
/// points to `len` integers.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_set_link_statuses(
    model: *mut ringmain_model,
    statuses: *const u32,
    len: usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, statuses) = unsafe { (handle_mut(model, "model")?, slice(statuses, len, "statuses")?) };
        m.set_link_statuses(statuses)
    }
}

/// Writes the status set on every link (a `ringmain_link_status`) into `buf` (`len` integers)
/// and the number of links to `count` (may be NULL). Buffer rules as
/// `ringmain_model_get_demands`.
///
/// # Safety
/// `model` is NULL or a live model; `buf` is NULL or `len` writable integers; `count` is NULL or
/// writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_get_link_statuses(
    model: *const ringmain_model,
    buf: *mut u32,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, count) = unsafe { (handle(model, "model")?, out_opt(count, "count")?) };
        let codes: Vec<u32> = (0..m.model.links().len()).map(|k| m.link_status(k) as u32).collect();
        // SAFETY: the caller's contract above.
        unsafe { copy_out(&codes, buf, len, count, "link statuses") }
    }
}

// ---------------------------------------------------------------------------------------------
// The structure in one call
// ---------------------------------------------------------------------------------------------

/// Copies texts back to back, each NUL-terminated, into `buf`; `needed` gets the total size.
unsafe fn copy_texts<'a>(
    texts: impl Iterator<Item = &'a str> + Clone,
    buf: *mut c_char,
    len: usize,
    needed: Option<Out<usize>>,
    what: &str,
) -> Result<(), Failure> {
    let total: usize = texts.clone().map(|t| t.len() + 1).sum();
    if len < total {
        if let Some(n) = needed {
            n.write(total);
        }
        return Err(Failure::new(
            ringmain_status::RINGMAIN_BUFFER_TOO_SMALL,
            format!("the buffer for {what} holds {len} bytes; {total} are needed"),
        ));
    }
    if total > 0 {
        let dst = NonNull::new(buf).ok_or_else(|| Failure::null("buf"))?;
        let mut at = 0;
        for t in texts {
            // SAFETY: `dst` holds `len >= total` bytes (caller's contract); the sources are Rust
            // strings, which cannot overlap the caller's buffer.
            unsafe {
                std::ptr::copy_nonoverlapping(t.as_ptr().cast::<c_char>(), dst.as_ptr().add(at), t.len());
                dst.as_ptr().add(at + t.len()).write(0);
            }
            at += t.len() + 1;
        }
    }
    if let Some(n) = needed {
        n.write(total);
    }
    Ok(())
}

/// Writes the id of every node, in node order, back to back, each NUL-terminated, into `buf`
/// (`len` bytes) and the size used, every NUL included, to `needed` (may be NULL). Returns
/// `RINGMAIN_BUFFER_TOO_SMALL` (writing only `needed`) when `len` is too small: call with
/// `len = 0` to ask for the size.
///
/// # Safety
/// `model` is NULL or a live model; `buf` is NULL or `len` writable bytes; `needed` is NULL or
/// writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_node_ids(
    model: *const ringmain_model,
    buf: *mut c_char,
    len: usize,
    needed: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, needed) = unsafe { (handle(model, "model")?, out_opt(needed, "needed")?) };
        // SAFETY: the caller's contract above.
        unsafe { copy_texts(m.model.nodes().iter().map(|n| n.id.as_str()), buf, len, needed, "node ids") }
    }
}

/// Writes the id of every link, in link order, as `ringmain_model_node_ids` does for nodes.
///
/// # Safety
/// As `ringmain_model_node_ids`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_link_ids(
    model: *const ringmain_model,
    buf: *mut c_char,
    len: usize,
    needed: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, needed) = unsafe { (handle(model, "model")?, out_opt(needed, "needed")?) };
        // SAFETY: the caller's contract above.
        unsafe { copy_texts(m.model.links().iter().map(|l| l.id.as_str()), buf, len, needed, "link ids") }
    }
}

/// Writes the zone of every node ("" for a node without one), in node order, as
/// `ringmain_model_node_ids` writes ids.
///
/// # Safety
/// As `ringmain_model_node_ids`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_node_zones(
    model: *const ringmain_model,
    buf: *mut c_char,
    len: usize,
    needed: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, needed) = unsafe { (handle(model, "model")?, out_opt(needed, "needed")?) };
        let zones = m.model.nodes().iter().map(|n| n.zone.as_deref().unwrap_or(""));
        // SAFETY: the caller's contract above.
        unsafe { copy_texts(zones, buf, len, needed, "node zones") }
    }
}

/// Writes the kind of every node (a `ringmain_node_kind`) into `buf` (`len` integers) and the
/// number of nodes to `count` (may be NULL). Buffer rules as `ringmain_model_get_demands`.
///
/// # Safety
/// `model` is NULL or a live model; `buf` is NULL or `len` writable integers; `count` is NULL or
/// writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_node_kinds(
    model: *const ringmain_model,
    buf: *mut u32,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, count) = unsafe { (handle(model, "model")?, out_opt(count, "count")?) };
        let codes =
            m.model.nodes().iter().map(|n| ringmain_node_kind::of(n).map(|k| k as u32)).collect::<Result<Vec<u32>, _>>()?;
        // SAFETY: the caller's contract above.
        unsafe { copy_out(&codes, buf, len, count, "node kinds") }
    }
}

/// Writes the kind of every link (a `ringmain_link_kind`) into `buf`, as
/// `ringmain_model_node_kinds` does for nodes.
///
/// # Safety
/// As `ringmain_model_node_kinds`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_link_kinds(
    model: *const ringmain_model,
    buf: *mut u32,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, count) = unsafe { (handle(model, "model")?, out_opt(count, "count")?) };
        let codes =
            m.model.links().iter().map(|l| ringmain_link_kind::of(l).map(|k| k as u32)).collect::<Result<Vec<u32>, _>>()?;
        // SAFETY: the caller's contract above.
        unsafe { copy_out(&codes, buf, len, count, "link kinds") }
    }
}

/// Writes the elevation of every node (length unit) into `buf`. Buffer rules as
/// `ringmain_model_get_demands`.
///
/// # Safety
/// As `ringmain_model_get_demands`.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_elevations(
    model: *const ringmain_model,
    buf: *mut f64,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { get_node_values(model, buf, len, count, "elevations", |n, u| Some(u.from_si(Quantity::Length, n.elevation))) }
    }
}

/// Writes two arrays of `len` elements each from `pairs`, and the count; nothing but the count
/// when `len` is too small.
unsafe fn copy_pairs<T: Copy>(
    pairs: &[(T, T)],
    first: *mut T,
    second: *mut T,
    len: usize,
    count: Option<Out<usize>>,
    what: &str,
) -> Result<(), Failure> {
    let n = pairs.len();
    if len < n {
        if let Some(c) = count {
            c.write(n);
        }
        return Err(Failure::new(
            ringmain_status::RINGMAIN_BUFFER_TOO_SMALL,
            format!("the buffers for {what} hold {len} values; {n} are needed"),
        ));
    }
    let a: Vec<T> = pairs.iter().map(|p| p.0).collect();
    let b: Vec<T> = pairs.iter().map(|p| p.1).collect();
    // SAFETY: forwarded; both buffers hold `len >= n` elements.
    unsafe {
        copy_out(&a, first, len, None, what)?;
        copy_out(&b, second, len, None, what)?;
    }
    if let Some(c) = count {
        c.write(n);
    }
    Ok(())
}

/// Writes the start and end node index of every link into `from` and `to` (`len` elements each)
/// and the number of links to `count` (may be NULL). Flow is positive from start to end. Buffer
/// rules as `ringmain_model_get_demands`.
///
/// # Safety
/// `model` is NULL or a live model; `from` and `to` are NULL or `len` writable elements each;
/// `count` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_link_ends(
    model: *const ringmain_model,
    from: *mut usize,
    to: *mut usize,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, count) = unsafe { (handle(model, "model")?, out_opt(count, "count")?) };
        let ends: Vec<(usize, usize)> = m.model.links().iter().map(|l| (l.from, l.to)).collect();
        // SAFETY: the caller's contract above.
        unsafe { copy_pairs(&ends, from, to, len, count, "link ends") }
    }
}

/// Writes the map coordinates of every node into `x` and `y` (`len` elements each; NaN for a
/// node without coordinates) and the number of nodes to `count` (may be NULL). Coordinates are
/// as written in the model (no unit conversion: they are map coordinates, not lengths of the
/// network). Buffer rules as `ringmain_model_get_demands`.
///
/// # Safety
/// `model` is NULL or a live model; `x` and `y` are NULL or `len` writable doubles each; `count`
/// is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_coordinates(
    model: *const ringmain_model,
    x: *mut f64,
    y: *mut f64,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, count) = unsafe { (handle(model, "model")?, out_opt(count, "count")?) };
        let xy: Vec<(f64, f64)> =
            m.model.nodes().iter().map(|n| n.coordinates.unwrap_or((f64::NAN, f64::NAN))).collect();
        // SAFETY: the caller's contract above.
        unsafe { copy_pairs(&xy, x, y, len, count, "coordinates") }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::{ringmain_model_free, ringmain_model_from_toml};

    const NET: &str = r#"
[[nodes]]
id = "R"
kind = "reservoir"
head = 50.0
[[nodes]]
id = "A"
elevation = 10.0
demand = 1.0
[[nodes]]
id = "B"
elevation = 12.0
demand = 2.0
[[links]]
id = "P1"
from = "R"
to = "A"
length = 100.0
diameter = 150.0
roughness = 120.0
[[links]]
id = "P2"
from = "A"
to = "B"
length = 100.0
diameter = 100.0
roughness = 120.0
"#;

    fn model() -> *mut ringmain_model {
        let mut m = std::ptr::null_mut();
        // SAFETY: valid text and out pointer.
        let s = unsafe { ringmain_model_from_toml(NET.as_ptr().cast(), NET.len(), &mut m) };
        assert_eq!(s, ringmain_status::RINGMAIN_OK);
        m
    }

    fn demands(m: *mut ringmain_model) -> Vec<f64> {
        let mut buf = [0.0; 3];
        // SAFETY: a live model and a buffer of 3.
        let s = unsafe { ringmain_model_get_demands(m, buf.as_mut_ptr(), 3, std::ptr::null_mut()) };
        assert_eq!(s, ringmain_status::RINGMAIN_OK);
        buf.to_vec()
    }

    #[test]
    fn whole_array_setters_change_all_or_nothing() {
        let m = model();
        let d = demands(m);
        assert!(d[0].is_nan());
        assert_eq!(&d[1..], &[1.0, 2.0]);
        // SAFETY: live model, buffers of the right length.
        unsafe {
            assert_eq!(ringmain_model_set_demands(m, [f64::NAN, 3.0, 4.0].as_ptr(), 3), ringmain_status::RINGMAIN_OK);
            assert_eq!(&demands(m)[1..], &[3.0, 4.0]);
            // A number at the reservoir: wrong kind, nothing changed.
            let s = ringmain_model_set_demands(m, [1.0, 5.0, 6.0].as_ptr(), 3);
            assert_eq!(s, ringmain_status::RINGMAIN_WRONG_KIND);
            assert_eq!(&demands(m)[1..], &[3.0, 4.0]);
            // An infinite value after a good one: the good one is undone.
            let s = ringmain_model_set_demands(m, [f64::NAN, 7.0, f64::INFINITY].as_ptr(), 3);
            assert_eq!(s, ringmain_status::RINGMAIN_MODEL_INVALID);
            assert_eq!(&demands(m)[1..], &[3.0, 4.0]);
            // Wrong length.
            let s = ringmain_model_set_demands(m, [1.0, 2.0].as_ptr(), 2);
            assert_eq!(s, ringmain_status::RINGMAIN_OUT_OF_RANGE);
            // A diameter that fails the check (second pipe) undoes the first pipe's.
            let s = ringmain_model_set_pipe_diameters(m, [200.0, -1.0].as_ptr(), 2);
            assert_eq!(s, ringmain_status::RINGMAIN_MODEL_INVALID);
            let mut d = [0.0; 2];
            let s = ringmain_model_get_pipe_diameters(m, d.as_mut_ptr(), 2, std::ptr::null_mut());
            assert_eq!(s, ringmain_status::RINGMAIN_OK);
            assert_eq!(d, [150.0, 100.0]);
            ringmain_model_free(m);
        }
    }

    #[test]
    fn ids_come_back_to_back() {
        let m = model();
        let mut needed = 0;
        // SAFETY: live model; size query then a buffer of that size.
        unsafe {
            let s = ringmain_model_node_ids(m, std::ptr::null_mut(), 0, &mut needed);
            assert_eq!(s, ringmain_status::RINGMAIN_BUFFER_TOO_SMALL);
            assert_eq!(needed, 6);
            let mut buf = vec![1 as c_char; needed];
            let s = ringmain_model_node_ids(m, buf.as_mut_ptr(), needed, &mut needed);
            assert_eq!(s, ringmain_status::RINGMAIN_OK);
            let bytes: Vec<u8> = buf.iter().map(|&c| c as u8).collect();
            assert_eq!(bytes, b"R\0A\0B\0");
            ringmain_model_free(m);
        }
    }
}
