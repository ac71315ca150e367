//! The run handle: an extended-period simulation's time series, summary and events, in the units
//! of the model it was run from (times in seconds from the start).

use crate::boundary::{copy_out, copy_text, free_handle, handle, handle_mut, into_handle, out, out_opt, Failure};
use crate::codes::ringmain_status;
use crate::convert::Quantity;
use crate::model::{out_of_range, ringmain_model};
use ringmain_core::quality::QualityRun;
use ringmain_core::simulate::{simulate, Run, SimulateError, SimulateOptions};
use ringmain_core::Model;
use std::ffi::c_char;
use std::sync::atomic::AtomicUsize;

/// Live run handles, for leak checks.
pub(crate) static LIVE_RUNS: AtomicUsize = AtomicUsize::new(0);

/// A quantity of a run's time series, for `ringmain_run_series`. Each series is a table of
/// time × element, written row by row (one row per reported time); its columns are the elements
/// `ringmain_run_columns` lists.
#[repr(u32)]
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ringmain_series {
    /// Head of every node (length unit; NaN where cut off). Columns: all nodes.
    RINGMAIN_SERIES_HEAD = 0,
    /// Pressure of every node (pressure unit; NaN where cut off). Columns: all nodes.
    RINGMAIN_SERIES_PRESSURE = 1,
    /// Demand of every node (flow unit). Columns: all nodes.
    RINGMAIN_SERIES_DEMAND = 2,
    /// Flow of every link (flow unit). Columns: all links.
    RINGMAIN_SERIES_FLOW = 3,
    /// Status of every link: 0 open, 1 closed, 2 active (regulating). Columns: all links.
    RINGMAIN_SERIES_STATUS = 4,
    /// Water level of every tank above its floor (length unit). Columns: the tanks.
    RINGMAIN_SERIES_LEVEL = 5,
    /// Volume of every tank (length unit cubed). Columns: the tanks.
    RINGMAIN_SERIES_VOLUME = 6,
    /// Relative speed of every pump in use (0 when stopped). Columns: the pumps.
    RINGMAIN_SERIES_PUMP_SPEED = 7,
    /// Shaft power of every pump (kW, or hp when lengths are in feet). Columns: the pumps.
    RINGMAIN_SERIES_PUMP_POWER = 8,
}

impl ringmain_series {
    const ALL: [ringmain_series; 9] = [
        ringmain_series::RINGMAIN_SERIES_HEAD,
        ringmain_series::RINGMAIN_SERIES_PRESSURE,
        ringmain_series::RINGMAIN_SERIES_DEMAND,
        ringmain_series::RINGMAIN_SERIES_FLOW,
        ringmain_series::RINGMAIN_SERIES_STATUS,
        ringmain_series::RINGMAIN_SERIES_LEVEL,
        ringmain_series::RINGMAIN_SERIES_VOLUME,
        ringmain_series::RINGMAIN_SERIES_PUMP_SPEED,
        ringmain_series::RINGMAIN_SERIES_PUMP_POWER,
    ];

    fn from_code(code: u32) -> Result<Self, Failure> {
        Self::ALL.iter().copied().find(|s| *s as u32 == code).ok_or_else(|| {
            Failure::invalid(format!("argument 'quantity': {code} is not a ringmain_series constant (0 to 8)"))
        })
    }
}

/// What a simulation did, in the model's units (volumes in the length unit cubed, times in
/// seconds). Written by `ringmain_run_get_summary`.
#[repr(C)]
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct ringmain_run_summary {
    /// Length of the run, s.
    pub duration: f64,
    /// Clock time at the start, s after midnight.
    pub start_clock: f64,
    /// Number of reported times (rows of each series).
    pub times: usize,
    /// Number of events (`ringmain_run_event`).
    pub events: usize,
    /// Volume supplied by reservoirs.
    pub supplied: f64,
    /// Volume delivered to demands.
    pub delivered: f64,
    /// Change in the volume stored in tanks (positive: filled).
    pub storage_change: f64,
    /// Volume of demand that could not be delivered (junctions cut off).
    pub not_delivered: f64,
    /// Supplied minus delivered minus storage change.
    pub discrepancy: f64,
    /// Whether some junction had water during the run (the three fields below are set).
    pub has_lowest_pressure: bool,
    /// Index of the junction with the lowest pressure of the run.
    pub lowest_pressure_node: usize,
    /// That pressure (pressure unit).
    pub lowest_pressure: f64,
    /// When it happened, s from the start.
    pub lowest_pressure_time: f64,
    /// Time steps accepted.
    pub steps: u64,
    /// Time steps rejected by the error control and retried shorter.
    pub rejected_steps: u64,
    /// Hydraulic solves.
    pub solves: u64,
}

/// The results of one extended-period simulation: the series of every reported time as arrays,
/// the summary and the events, in the units of the model it was run from.
///
/// Made by `ringmain_model_simulate`; freed by the caller with `ringmain_run_free` (once). Like
/// results, a run does not refer to its model and is never changed after it is made: any number
/// of threads may read it at the same time.
pub struct ringmain_run {
    times: Vec<f64>,
    nodes: usize,
    links: usize,
    tanks: Vec<usize>,
    pumps: Vec<usize>,
    /// Per quantity, row-major time × column.
    series: [Vec<f64>; 9],
    summary: ringmain_run_summary,
    events: Vec<(f64, String)>,
    /// Water quality, when the model has constituents: per constituent its id, report unit, and
    /// values row-major time × node and time × link, in report units.
    quality: Vec<QualitySeries>,
}

/// One constituent's series.
struct QualitySeries {
    id: String,
    unit: String,
    nodes: Vec<f64>,
    links: Vec<f64>,
}

impl ringmain_run {
    fn new(model: &Model, run: &Run, quality: Option<&QualityRun>) -> Self {
        let u = model.converter();
        let volume = |v: f64| v / model.units.length.to_si(1.0).powi(3);
        let rows = run.series.len();
        let mut series: [Vec<f64>; 9] = Default::default();
        let nodes = model.nodes().len();
        let links = model.links().len();
        let widths =
            [nodes, nodes, nodes, links, links, run.tanks.len(), run.tanks.len(), run.pumps.len(), run.pumps.len()];
        for (s, w) in series.iter_mut().zip(widths) {
            s.reserve_exact(rows * w);
        }
        for snap in &run.series {
            series[0].extend(snap.head.iter().map(|&h| u.from_si(Quantity::Length, h)));
            series[1].extend(snap.pressure.iter().map(|&p| u.from_si(Quantity::Pressure, p)));
            series[2].extend(snap.demand.iter().map(|&q| u.from_si(Quantity::Flow, q)));
            series[3].extend(snap.flow.iter().map(|&q| u.from_si(Quantity::Flow, q)));
            series[4].extend(snap.status.iter().map(|s| match *s {
                "closed" => 1.0,
                "active" => 2.0,
                _ => 0.0,
            }));
            series[5].extend(snap.level.iter().map(|&l| u.from_si(Quantity::Length, l)));
            series[6].extend(snap.volume.iter().map(|&v| volume(v)));
            series[7].extend(snap.pump_speed.iter().copied());
            series[8].extend(snap.pump_power.iter().map(|&w| u.from_si(Quantity::Power, w)));
        }
        let b = &run.balance;
        let (has_low, low_node, low_p, low_t) = match run.lowest_pressure {
            Some((node, p, t)) => (true, node, u.from_si(Quantity::Pressure, p), t),
            None => (false, 0, f64::NAN, f64::NAN),
        };
        let summary = ringmain_run_summary {
            duration: run.duration,
            start_clock: run.start_clock,
            times: rows,
            events: run.events.len(),
            supplied: volume(b.supplied),
            delivered: volume(b.delivered),
            storage_change: volume(b.storage_change),
            not_delivered: volume(b.unsupplied),
            discrepancy: volume(b.discrepancy()),
            has_lowest_pressure: has_low,
            lowest_pressure_node: low_node,
            lowest_pressure: low_p,
            lowest_pressure_time: low_t,
            steps: run.statistics.steps,
            rejected_steps: run.statistics.rejected,
            solves: run.statistics.solves,
        };
        ringmain_run {
            times: run.series.iter().map(|s| s.time).collect(),
            nodes,
            links,
            tanks: run.tanks.clone(),
            pumps: run.pumps.clone(),
            series,
            summary,
            events: run.events.iter().map(|e| (e.time, e.describe(model))).collect(),
            quality: quality.map_or_else(Vec::new, |q| {
                q.constituents
                    .iter()
                    .enumerate()
                    .map(|(c, constituent)| {
                        let scale = constituent.report_scale();
                        QualitySeries {
                            id: constituent.id.clone(),
                            unit: constituent.report_unit().to_owned(),
                            nodes: q.records.iter().flat_map(|r| r.node[c].iter().map(move |v| v * scale)).collect(),
                            links: q.records.iter().flat_map(|r| r.link[c].iter().map(move |v| v * scale)).collect(),
                        }
                    })
                    .collect()
            }),
        }
    }

    fn constituent(&self, index: usize) -> Result<&QualitySeries, Failure> {
        self.quality.get(index).ok_or_else(|| out_of_range("constituent", index, self.quality.len()))
    }

    fn columns(&self, quantity: ringmain_series) -> Vec<usize> {
        use ringmain_series::*;
        match quantity {
            RINGMAIN_SERIES_HEAD | RINGMAIN_SERIES_PRESSURE | RINGMAIN_SERIES_DEMAND => (0..self.nodes).collect(),
            RINGMAIN_SERIES_FLOW | RINGMAIN_SERIES_STATUS => (0..self.links).collect(),
            RINGMAIN_SERIES_LEVEL | RINGMAIN_SERIES_VOLUME => self.tanks.clone(),
            RINGMAIN_SERIES_PUMP_SPEED | RINGMAIN_SERIES_PUMP_POWER => self.pumps.clone(),
        }
    }
}

/// Runs the model's extended-period simulation (its `[simulation]` table: duration, steps,
/// patterns, controls, tanks; and the transport of its `[[quality]]` constituents when it has
/// some) and writes a new run handle to `*out` (free it with `ringmain_run_free`). Uses the library's worker threads (see `ringmain_set_threads`).
///
/// Errors: `RINGMAIN_MODEL_INVALID` when the model has no `[simulation]` table or fails its
/// checks; `RINGMAIN_NOT_CONVERGED` or `RINGMAIN_SOLVE_FAILED` when a solve during the run fails
/// (the last error says when into the run and why). No run then.
///
/// # Safety
/// `model` is NULL or a live model used by no other thread during the call; `out` is NULL or
/// writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_model_simulate(
    model: *mut ringmain_model,
    out: *mut *mut ringmain_run,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, out) = unsafe { (handle_mut(model, "model")?, self::out(out, "out")?) };
        // The model with the values set since it was loaded or built (a copy only if some were).
        let current = m.current()?;
        let model = &*current;
        let with_quality = !model.time.quality.constituents.is_empty();
        let result = crate::threads::install(|| {
            if with_quality {
                ringmain_core::quality::simulate(model, &SimulateOptions::default(), &mut |_| {})
                    .map(|(run, quality)| (run, Some(quality)))
            } else {
                simulate(model).map(|run| (run, None))
            }
        })?;
        let (run, quality) = result.map_err(|e| {
            let status = match &e {
                SimulateError::Model(_) => ringmain_status::RINGMAIN_MODEL_INVALID,
                SimulateError::Solve { error: ringmain_core::SolveError::NotConverged { .. }, .. } => {
                    ringmain_status::RINGMAIN_NOT_CONVERGED
                }
                _ => ringmain_status::RINGMAIN_SOLVE_FAILED,
            };
            let message = match &m.source {
                Some(file) => format!("{file}: {e}"),
                None => e.to_string(),
            };
            Failure::new(status, message)
        })?;
        out.write(into_handle(ringmain_run::new(model, &run, quality.as_ref()), &LIVE_RUNS));
        Ok(())
    }
}

/// Frees a run. NULL is ignored.
///
/// # Safety
/// `run` is NULL or a live run, not used again afterwards.
#[no_mangle]
pub unsafe extern "C" fn ringmain_run_free(run: *mut ringmain_run) {
    // A free function cannot report failure; a panic while dropping is caught and ignored.
    let _ = ffi_boundary! {
        // SAFETY: the caller's contract above.
        unsafe { free_handle(run, &LIVE_RUNS) };
        Ok(())
    };
}

/// Writes the run's summary to `*out`.
///
/// # Safety
/// `run` is NULL or a live run; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_run_get_summary(
    run: *const ringmain_run,
    out: *mut ringmain_run_summary,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (r, out) = unsafe { (handle(run, "run")?, self::out(out, "out")?) };
        out.write(r.summary);
        Ok(())
    }
}

/// Writes the reported times (s from the start, increasing) into `buf` (`len` doubles) and their
/// number to `count` (may be NULL). Returns `RINGMAIN_BUFFER_TOO_SMALL` (writing only `count`)
/// when `len` is too small.
///
/// # Safety
/// `run` is NULL or a live run; `buf` is NULL or `len` writable doubles; `count` is NULL or
/// writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_run_times(
    run: *const ringmain_run,
    buf: *mut f64,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (r, count) = unsafe { (handle(run, "run")?, out_opt(count, "count")?) };
        // SAFETY: the caller's contract above.
        unsafe { copy_out(&r.times, buf, len, count, "times") }
    }
}

/// Writes the element index of each column of a series (`quantity` is a `ringmain_series`):
/// node indices for node quantities, link indices for link quantities, the tanks' node indices
/// for levels and volumes, the pumps' link indices for pump quantities. Buffer rules as
/// `ringmain_run_times`.
///
/// # Safety
/// `run` is NULL or a live run; `buf` is NULL or `len` writable elements; `count` is NULL or
/// writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_run_columns(
    run: *const ringmain_run,
    quantity: u32,
    buf: *mut usize,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (r, count) = unsafe { (handle(run, "run")?, out_opt(count, "count")?) };
        let quantity = ringmain_series::from_code(quantity)?;
        // SAFETY: the caller's contract above.
        unsafe { copy_out(&r.columns(quantity), buf, len, count, "columns") }
    }
}

/// Writes a whole series (`quantity` is a `ringmain_series`) into `buf`: times × columns, row by
/// row (the value of column `j` at time `i` is `buf[i * columns + j]`), in the model's units. The
/// number of values (times × columns) goes to `count` (may be NULL). Buffer rules as
/// `ringmain_run_times`.
///
/// Errors: `RINGMAIN_INVALID_ARGUMENT` for an integer that names no series.
///
/// # Safety
/// `run` is NULL or a live run; `buf` is NULL or `len` writable doubles; `count` is NULL or
/// writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_run_series(
    run: *const ringmain_run,
    quantity: u32,
    buf: *mut f64,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (r, count) = unsafe { (handle(run, "run")?, out_opt(count, "count")?) };
        let quantity = ringmain_series::from_code(quantity)?;
        // SAFETY: the caller's contract above.
        unsafe { copy_out(&r.series[quantity as usize], buf, len, count, "the series") }
    }
}

/// Writes the time of event `index` (s from the start) to `*time` (may be NULL) and its
/// description, naming the elements involved, into `buf` (`len` bytes, NUL-terminated) with its
/// size to `needed` (may be NULL). Events are in time order; `ringmain_run_get_summary` gives their
/// number. Returns `RINGMAIN_BUFFER_TOO_SMALL` (writing only `needed`) when `len` is too small.
///
/// Errors: `RINGMAIN_OUT_OF_RANGE` for an index past the last event.
///
/// # Safety
/// `run` is NULL or a live run; `time` and `needed` are NULL or writable; `buf` is NULL or `len`
/// writable bytes.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_run_event(
    run: *const ringmain_run,
    index: usize,
    time: *mut f64,
    buf: *mut c_char,
    len: usize,
    needed: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (r, time, needed) = unsafe { (handle(run, "run")?, out_opt(time, "time")?, out_opt(needed, "needed")?) };
        let (t, text) = r.events.get(index).ok_or_else(|| out_of_range("event", index, r.events.len()))?;
        // SAFETY: the caller's contract above.
        unsafe { copy_text(text, buf, len, needed) }?;
        if let Some(o) = time {
            o.write(*t);
        }
        Ok(())
    }
}

/// Writes the number of water-quality constituents of the run to `*out` (0 when the model has no
/// `[[quality]]` table).
///
/// # Safety
/// `run` is NULL or a live run; `out` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_run_constituent_count(run: *const ringmain_run, out: *mut usize) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (r, out) = unsafe { (handle(run, "run")?, self::out(out, "out")?) };
        out.write(r.quality.len());
        Ok(())
    }
}

/// Writes the id of constituent `index` (as in the model's `[[quality]]` table) into `buf`, or
/// with `unit` true the unit its values are reported in ("h" for water age, "%" for a source
/// trace, the substance's unit otherwise). Text buffer rules as `ringmain_run_event`.
///
/// Errors: `RINGMAIN_OUT_OF_RANGE` for an index past the last constituent.
///
/// # Safety
/// `run` is NULL or a live run; `buf` is NULL or `len` writable bytes; `needed` is NULL or
/// writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_run_constituent(
    run: *const ringmain_run,
    index: usize,
    unit: bool,
    buf: *mut c_char,
    len: usize,
    needed: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (r, needed) = unsafe { (handle(run, "run")?, out_opt(needed, "needed")?) };
        let c = r.constituent(index)?;
        // SAFETY: the caller's contract above.
        unsafe { copy_text(if unit { &c.unit } else { &c.id }, buf, len, needed) }
    }
}

/// Writes the values of constituent `index` at every reported time into `buf`: with `links`
/// false at every node (time × node, row by row), with `links` true the mean over every link's
/// water (time × link); in the unit `ringmain_run_constituent` gives. Buffer rules as
/// `ringmain_run_times`.
///
/// Errors: `RINGMAIN_OUT_OF_RANGE` for an index past the last constituent.
///
/// # Safety
/// `run` is NULL or a live run; `buf` is NULL or `len` writable doubles; `count` is NULL or
/// writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_run_quality(
    run: *const ringmain_run,
    index: usize,
    links: bool,
    buf: *mut f64,
    len: usize,
    count: *mut usize,
) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (r, count) = unsafe { (handle(run, "run")?, out_opt(count, "count")?) };
        let c = r.constituent(index)?;
        // SAFETY: the caller's contract above.
        unsafe { copy_out(if links { &c.links } else { &c.nodes }, buf, len, count, "the quality series") }
    }
}
