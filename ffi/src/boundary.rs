//! The boundary between C and Rust: the panic-catching wrapper, the thread's last error, and the
//! helpers that turn C pointers into Rust values.
//!
//! Every exported function's body runs inside `ffi_boundary!`: the body returns
//! `Result<(), Failure>`; `Ok` becomes `RINGMAIN_OK`, a [`Failure`] records its message as the
//! calling thread's last error and becomes its status code, and a panic (a bug) is caught and
//! becomes `RINGMAIN_PANIC` with the panic's message as the last error. No panic unwinds into C.
//!
//! Outputs are written only on success: functions compute everything first and write through
//! their [`Out`] pointers as the last step. The one documented exception is the size output of a
//! function that fills a caller's buffer, which is also written with `RINGMAIN_BUFFER_TOO_SMALL`
//! so that the caller can retry with a buffer of the right size.

use crate::codes::ringmain_status;
use ringmain_core::{ModelError, SolveError};
use std::cell::RefCell;
use std::ffi::{c_char, CStr};
use std::panic::{catch_unwind, AssertUnwindSafe};
use std::ptr::NonNull;
use std::sync::atomic::{AtomicUsize, Ordering};

/// Why a call failed: the status code and the full message for `ringmain_last_error`.
#[derive(Clone, Debug, PartialEq)]
pub struct Failure {
    /// The code returned to C.
    pub status: ringmain_status,
    /// The message, naming the element and key where there is one.
    pub message: String,
}

impl Failure {
    /// A failure with a code and a message.
    pub fn new(status: ringmain_status, message: impl Into<String>) -> Self {
        Failure { status, message: message.into() }
    }

    /// `RINGMAIN_INVALID_ARGUMENT`.
    pub fn invalid(message: impl Into<String>) -> Self {
        Failure::new(ringmain_status::RINGMAIN_INVALID_ARGUMENT, message)
    }

    /// `RINGMAIN_NULL_POINTER` for the named argument.
    pub fn null(argument: &str) -> Self {
        Failure::new(ringmain_status::RINGMAIN_NULL_POINTER, format!("argument '{argument}' is NULL"))
    }

    /// `RINGMAIN_WRONG_KIND`.
    pub fn wrong_kind(message: impl Into<String>) -> Self {
        Failure::new(ringmain_status::RINGMAIN_WRONG_KIND, message)
    }

    /// A solver error, mapped to its code.
    pub fn solve(error: SolveError) -> Self {
        let status = match &error {
            SolveError::Model(_) => ringmain_status::RINGMAIN_MODEL_INVALID,
            SolveError::NotConverged { .. } => ringmain_status::RINGMAIN_NOT_CONVERGED,
            _ => ringmain_status::RINGMAIN_SOLVE_FAILED,
        };
        Failure::new(status, error.to_string())
    }

    /// Stores the message as this thread's last error and returns the code.
    fn record(self) -> ringmain_status {
        LAST_ERROR.with(|e| *e.borrow_mut() = self.message);
        self.status
    }
}

impl From<ModelError> for Failure {
    fn from(error: ModelError) -> Self {
        Failure::new(ringmain_status::RINGMAIN_MODEL_INVALID, error.to_string())
    }
}

thread_local! {
    static LAST_ERROR: RefCell<String> = const { RefCell::new(String::new()) };
}

/// Runs the body of an exported function: catches panics, records failures, returns the status.
pub fn run(body: impl FnOnce() -> Result<(), Failure>) -> ringmain_status {
    match catch_unwind(AssertUnwindSafe(body)) {
        Ok(Ok(())) => ringmain_status::RINGMAIN_OK,
        Ok(Err(failure)) => failure.record(),
        Err(payload) => {
            let what = payload
                .downcast_ref::<&str>()
                .map(|s| (*s).to_owned())
                .or_else(|| payload.downcast_ref::<String>().cloned())
                .unwrap_or_else(|| "no message".to_owned());
            Failure::new(
                ringmain_status::RINGMAIN_PANIC,
                format!("internal error (a bug in ringmain, please report it): {what}"),
            )
            .record()
        }
    }
}

/// The wrapper every exported function's body runs in (see the module documentation).
macro_rules! ffi_boundary {
    ($($body:tt)*) => {
        $crate::boundary::run(move || -> ::std::result::Result<(), $crate::boundary::Failure> { $($body)* })
    };
}

/// Live handles, for leak checks by the bindings' tests.
pub(crate) static LIVE_MODELS: AtomicUsize = AtomicUsize::new(0);
/// Live result handles.
pub(crate) static LIVE_RESULTS: AtomicUsize = AtomicUsize::new(0);

/// A checked, non-NULL, aligned output pointer; written once, on success.
pub struct Out<T>(NonNull<T>);

impl<T> Out<T> {
    /// Writes the output (the pointer was checked when the `Out` was made).
    pub fn write(self, value: T) {
        // SAFETY: `out` checked the pointer for NULL and alignment; the caller promised it points
        // to writable memory for a `T`.
        unsafe { self.0.as_ptr().write(value) }
    }
}

fn aligned<T>(p: *const T, argument: &str) -> Result<(), Failure> {
    if p.is_aligned() {
        Ok(())
    } else {
        Err(Failure::new(ringmain_status::RINGMAIN_NULL_POINTER, format!("argument '{argument}' is misaligned")))
    }
}

/// Checks an output pointer.
///
/// # Safety
/// `p` is NULL or points to writable memory for a `T`.
pub unsafe fn out<T>(p: *mut T, argument: &str) -> Result<Out<T>, Failure> {
    let p = NonNull::new(p).ok_or_else(|| Failure::null(argument))?;
    aligned(p.as_ptr(), argument)?;
    Ok(Out(p))
}

/// Checks an optional output pointer (NULL: the caller does not want this output).
///
/// # Safety
/// As [`out`].
pub unsafe fn out_opt<T>(p: *mut T, argument: &str) -> Result<Option<Out<T>>, Failure> {
    if p.is_null() {
        Ok(None)
    } else {
        // SAFETY: forwarded contract.
        unsafe { out(p, argument) }.map(Some)
    }
}

/// A shared reference to a handle.
///
/// # Safety
/// `p` is NULL or a live handle made by this library and not being mutated by another thread.
pub unsafe fn handle<'a, T>(p: *const T, argument: &str) -> Result<&'a T, Failure> {
    if p.is_null() {
        return Err(Failure::null(argument));
    }
    aligned(p, argument)?;
    // SAFETY: non-NULL and aligned; liveness is the caller's contract.
    Ok(unsafe { &*p })
}

/// An exclusive reference to a handle.
///
/// # Safety
/// `p` is NULL or a live handle made by this library, used by no other thread during the call.
pub unsafe fn handle_mut<'a, T>(p: *mut T, argument: &str) -> Result<&'a mut T, Failure> {
    if p.is_null() {
        return Err(Failure::null(argument));
    }
    aligned(p, argument)?;
    // SAFETY: non-NULL and aligned; liveness and exclusivity are the caller's contract.
    Ok(unsafe { &mut *p })
}

/// A NUL-terminated UTF-8 string argument.
///
/// # Safety
/// `p` is NULL or points to a NUL-terminated string that stays unchanged during the call.
pub unsafe fn text<'a>(p: *const c_char, argument: &str) -> Result<&'a str, Failure> {
    if p.is_null() {
        return Err(Failure::null(argument));
    }
    // SAFETY: non-NULL; NUL termination is the caller's contract.
    let c = unsafe { CStr::from_ptr(p) };
    c.to_str().map_err(|e| {
        Failure::invalid(format!(
            "argument '{argument}' is not UTF-8 text (invalid byte at offset {})",
            e.valid_up_to()
        ))
    })
}

/// `len` elements at `p` (`p` may be NULL when `len` is zero).
///
/// # Safety
/// `p` is NULL or points to `len` readable elements that stay unchanged during the call.
pub unsafe fn slice<'a, T>(p: *const T, len: usize, argument: &str) -> Result<&'a [T], Failure> {
    if len == 0 {
        return Ok(&[]);
    }
    if p.is_null() {
        return Err(Failure::null(argument));
    }
    aligned(p, argument)?;
    if len > isize::MAX as usize / std::mem::size_of::<T>().max(1) {
        return Err(Failure::new(
            ringmain_status::RINGMAIN_OUT_OF_RANGE,
            format!("argument '{argument}': length {len} is larger than any buffer can be"),
        ));
    }
    // SAFETY: non-NULL, aligned, size checked; readability is the caller's contract.
    Ok(unsafe { std::slice::from_raw_parts(p, len) })
}

/// Copies `values` into the caller's buffer `buf` of `len` elements and writes the count.
///
/// When `len` is too small nothing is copied, the count needed is written and the call fails with
/// `RINGMAIN_BUFFER_TOO_SMALL` (so `len = 0`, `buf = NULL` asks for the size).
///
/// # Safety
/// `buf` is NULL or points to `len` writable elements.
pub unsafe fn copy_out<T: Copy>(
    values: &[T],
    buf: *mut T,
    len: usize,
    count: Option<Out<usize>>,
    what: &str,
) -> Result<(), Failure> {
    let n = values.len();
    if len < n {
        if let Some(c) = count {
            c.write(n);
        }
        return Err(Failure::new(
            ringmain_status::RINGMAIN_BUFFER_TOO_SMALL,
            format!("the buffer for {what} holds {len} values; {n} are needed"),
        ));
    }
    if n > 0 {
        let dst = NonNull::new(buf).ok_or_else(|| Failure::null("buf"))?;
        aligned(dst.as_ptr(), "buf")?;
        // SAFETY: `dst` is non-NULL and aligned and holds `len >= n` elements (caller's contract);
        // `values` is a Rust slice, which cannot overlap memory the caller lends as a buffer.
        unsafe { std::ptr::copy_nonoverlapping(values.as_ptr(), dst.as_ptr(), n) };
    }
    if let Some(c) = count {
        c.write(n);
    }
    Ok(())
}

/// Copies `value` with a terminating NUL into the caller's buffer `buf` of `len` bytes and
/// writes the size used (terminating NUL included) to `needed`.
///
/// When `len` is too small nothing is copied, the size needed is written and the call fails with
/// `RINGMAIN_BUFFER_TOO_SMALL`.
///
/// # Safety
/// `buf` is NULL or points to `len` writable bytes.
pub unsafe fn copy_text(value: &str, buf: *mut c_char, len: usize, needed: Option<Out<usize>>) -> Result<(), Failure> {
    let n = value.len() + 1;
    if len < n {
        if let Some(c) = needed {
            c.write(n);
        }
        return Err(Failure::new(
            ringmain_status::RINGMAIN_BUFFER_TOO_SMALL,
            format!("the text needs {n} bytes (terminating NUL included); the buffer holds {len}"),
        ));
    }
    let dst = NonNull::new(buf).ok_or_else(|| Failure::null("buf"))?;
    // SAFETY: `dst` holds `len >= n` bytes (caller's contract); the source is a Rust string.
    unsafe {
        std::ptr::copy_nonoverlapping(value.as_ptr().cast::<c_char>(), dst.as_ptr(), n - 1);
        dst.as_ptr().add(n - 1).write(0);
    }
    if let Some(c) = needed {
        c.write(n);
    }
    Ok(())
}

/// A short, static description of a status code. Never NULL: an integer that is no status code
/// gives "unknown status code". The returned string lives as long as the program.
///
/// Like `ringmain_version`, a lookup that cannot fail, so it returns its answer directly
/// rather than a status.
#[no_mangle]
pub extern "C" fn ringmain_status_text(status: u32) -> *const c_char {
    ringmain_status::ALL
        .iter()
        .find(|s| **s as u32 == status)
        .map_or(c"unknown status code".as_ptr(), |s| s.text().as_ptr())
}

/// The library's version as text, "MAJOR.MINOR.PATCH" (static, never NULL). Compare with
/// `RINGMAIN_VERSION` to check that the header and the loaded library agree.
#[no_mangle]
pub extern "C" fn ringmain_version() -> *const c_char {
    const VERSION: &CStr = match CStr::from_bytes_with_nul(concat!(env!("CARGO_PKG_VERSION"), "\0").as_bytes()) {
        Ok(v) => v,
        Err(_) => c"unknown",
    };
    VERSION.as_ptr()
}

/// Copies the calling thread's last error message into `buf` (`len` bytes) as `snprintf` does:
/// at most `len - 1` bytes of the message and a terminating NUL, cut short at a character
/// boundary when the buffer is too small (so the text stays valid UTF-8). The size of the whole
/// message, terminating NUL included, goes to `needed` (may be NULL), whatever `len` is.
///
/// The last error is the full message of the most recent call on this thread that returned
/// something other than `RINGMAIN_OK`, naming the file, element and key where there is one, as
/// the command-line program does. Successful calls leave it as it was; it is empty before any
/// failure. This function does not change it.
///
/// Returns `RINGMAIN_OK` when the whole message fitted, `RINGMAIN_BUFFER_TOO_SMALL` when it was
/// cut short (the buffer still holds the beginning of the message, NUL-terminated, unless `len`
/// is zero): a fixed buffer always gives something printable, and `needed` tells the size for a
/// retry. `buf` may be NULL only when `len` is zero.
///
/// # Safety
/// `buf` is NULL or points to `len` writable bytes; `needed` is NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_last_error(buf: *mut c_char, len: usize, needed: *mut usize) -> ringmain_status {
    let message = LAST_ERROR.with(|e| e.borrow().clone());
    let status = catch_unwind(AssertUnwindSafe(|| {
        // SAFETY: the caller's contract above.
        let needed = unsafe { out_opt(needed, "needed") }?;
        // SAFETY: the caller's contract above.
        unsafe { truncate_text(&message, buf, len, needed) }
    }));
    match status {
        Ok(Ok(status)) => status,
        Ok(Err(f)) => f.status,
        Err(_) => ringmain_status::RINGMAIN_PANIC,
    }
}

/// Copies as much of `value` as fits in `len - 1` bytes (cut at a character boundary) and a NUL
/// into `buf`, writes the full size to `needed`; `RINGMAIN_BUFFER_TOO_SMALL` when cut short.
///
/// # Safety
/// `buf` is NULL or points to `len` writable bytes.
unsafe fn truncate_text(
    value: &str,
    buf: *mut c_char,
    len: usize,
    needed: Option<Out<usize>>,
) -> Result<ringmain_status, Failure> {
    let full = value.len() + 1;
    if len > 0 {
        let dst = NonNull::new(buf).ok_or_else(|| Failure::null("buf"))?;
        let mut n = value.len().min(len - 1);
        while !value.is_char_boundary(n) {
            n -= 1;
        }
        // SAFETY: `dst` holds `len > n` bytes (caller's contract); the source is a Rust string.
        unsafe {
            std::ptr::copy_nonoverlapping(value.as_ptr().cast::<c_char>(), dst.as_ptr(), n);
            dst.as_ptr().add(n).write(0);
        }
    }
    if let Some(o) = needed {
        o.write(full);
    }
    Ok(if len >= full { ringmain_status::RINGMAIN_OK } else { ringmain_status::RINGMAIN_BUFFER_TOO_SMALL })
}

/// Writes the numbers of model and result handles alive in the whole process (made and not yet
/// freed) to `models` and `results` (either may be NULL). Meant for leak checks in tests.
///
/// # Safety
/// `models` and `results` are NULL or writable.
#[no_mangle]
#[must_use]
pub unsafe extern "C" fn ringmain_live_handles(models: *mut usize, results: *mut usize) -> ringmain_status {
    ffi_boundary! {
        // SAFETY: the caller's contract above.
        let (m, r) = unsafe { (out_opt(models, "models")?, out_opt(results, "results")?) };
        if let Some(m) = m {
            m.write(LIVE_MODELS.load(Ordering::SeqCst));
        }
        if let Some(r) = r {
            r.write(LIVE_RESULTS.load(Ordering::SeqCst));
        }
        Ok(())
    }
}

/// Moves a value into a new handle for C, counting it.
pub(crate) fn into_handle<T>(value: T, counter: &AtomicUsize) -> *mut T {
    counter.fetch_add(1, Ordering::SeqCst);
    Box::into_raw(Box::new(value))
}

/// Frees a handle made by [`into_handle`]; NULL is ignored.
///
/// # Safety
/// `p` is NULL or a live handle made by [`into_handle`] with the same `T`, not used afterwards.
pub(crate) unsafe fn free_handle<T>(p: *mut T, counter: &AtomicUsize) {
    if !p.is_null() {
        // SAFETY: the caller's contract.
        drop(unsafe { Box::from_raw(p) });
        counter.fetch_sub(1, Ordering::SeqCst);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn last_error() -> String {
        LAST_ERROR.with(|e| e.borrow().clone())
    }

    #[test]
    fn a_panic_becomes_a_status_and_a_message() {
        let status = ffi_boundary! {
            let v: Vec<u32> = Vec::new();
            let _ = v[3];
            Ok(())
        };
        assert_eq!(status, ringmain_status::RINGMAIN_PANIC);
        assert!(last_error().contains("a bug in ringmain"), "{}", last_error());
        assert!(last_error().contains("index out of bounds"), "{}", last_error());
    }

    #[test]
    fn a_failure_records_its_message_and_success_keeps_it() {
        let status = ffi_boundary! { Err(Failure::invalid("argument 'x': bad")) };
        assert_eq!(status, ringmain_status::RINGMAIN_INVALID_ARGUMENT);
        assert_eq!(ffi_boundary! { Ok(()) }, ringmain_status::RINGMAIN_OK);
        assert_eq!(last_error(), "argument 'x': bad");
    }

    #[test]
    fn text_buffers_report_the_size_needed() {
        let mut needed = 0usize;
        // SAFETY: a NULL buffer of length zero and a valid `needed`.
        let r = unsafe { copy_text("abc", std::ptr::null_mut(), 0, Some(out(&mut needed, "n").unwrap())) };
        assert_eq!(r.unwrap_err().status, ringmain_status::RINGMAIN_BUFFER_TOO_SMALL);
        assert_eq!(needed, 4);
        let mut buf = [1 as c_char; 4];
        // SAFETY: a buffer of 4 bytes.
        unsafe { copy_text("abc", buf.as_mut_ptr(), 4, None) }.unwrap();
        // SAFETY: copy_text wrote a terminating NUL.
        assert_eq!(unsafe { CStr::from_ptr(buf.as_ptr()) }.to_str().unwrap(), "abc");
    }

    #[test]
    fn last_error_truncates_like_snprintf() {
        let _ = ffi_boundary! { Err(Failure::invalid("node 'Ä1': bad")) };
        let full = "node 'Ä1': bad".len() + 1;
        let mut needed = 0usize;
        let mut buf = [1 as c_char; 8];
        // SAFETY: a buffer of 8 bytes and a valid `needed`.
        let s = unsafe { ringmain_last_error(buf.as_mut_ptr(), 8, &mut needed) };
        assert_eq!(s, ringmain_status::RINGMAIN_BUFFER_TOO_SMALL);
        assert_eq!(needed, full);
        // SAFETY: NUL-terminated by the call.
        let got = unsafe { CStr::from_ptr(buf.as_ptr()) }.to_str().unwrap();
        // Seven bytes would cut 'Ä' (two bytes at offsets 6 and 7): the cut moves back to 6.
        assert_eq!(got, "node '");
        let mut big = [0 as c_char; 64];
        // SAFETY: a buffer of 64 bytes.
        let s = unsafe { ringmain_last_error(big.as_mut_ptr(), 64, &mut needed) };
        assert_eq!(s, ringmain_status::RINGMAIN_OK);
        // SAFETY: NUL-terminated by the call.
        assert_eq!(unsafe { CStr::from_ptr(big.as_ptr()) }.to_str().unwrap(), "node 'Ä1': bad");
        // SAFETY: length zero, NULL buffer: only the size.
        let s = unsafe { ringmain_last_error(std::ptr::null_mut(), 0, &mut needed) };
        assert_eq!(s, ringmain_status::RINGMAIN_BUFFER_TOO_SMALL);
        assert_eq!(needed, full);
    }

    #[test]
    fn status_text_is_total() {
        for &s in ringmain_status::ALL {
            assert!(!s.text().to_bytes().is_empty());
        }
        // SAFETY: the function returns a static NUL-terminated string.
        let unknown = unsafe { CStr::from_ptr(ringmain_status_text(1000)) };
        assert_eq!(unknown.to_str().unwrap(), "unknown status code");
    }
}
