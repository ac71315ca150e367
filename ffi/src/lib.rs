//! ringmain-ffi: the C ABI of ringmain (`libringmain.so`, `libringmain.a`, `include/ringmain.h`).
//!
//! The header is generated from this crate by cbindgen (version pinned in
//! `scripts/test-embedding.sh`) and committed; the doc comments here are written for C readers,
//! since cbindgen copies them into the header. The overview (ownership, units, threads, errors)
//! is the header's preamble in `cbindgen.toml`.
//!
//! The version defines of the header (`RINGMAIN_VERSION_MAJOR`... and `RINGMAIN_VERSION`) are
//! written in `cbindgen.toml`; `tests/header.rs` checks them against this package's version.
//!
//! Layout: [`boundary`] holds the panic-catching wrapper every exported function runs in, the
//! thread's last error and the pointer helpers; [`convert`] converts between SI and the model's
//! units (values cross the boundary in the model's units, like the command-line program's
//! results); [`model`] and [`results`] are the two handles and their functions; [`codes`] the
//! enums C passes in and gets out as plain integers.
//!
//! Safety contract of every `unsafe extern "C"` function: each pointer argument is NULL or points
//! to what its documentation says (a live handle made by this library, a NUL-terminated string,
//! or `len` readable/writable elements). NULL and misaligned pointers are detected and reported
//! as errors; dangling pointers cannot be, and are the caller's responsibility.

#![allow(non_camel_case_types)]
#![deny(unsafe_op_in_unsafe_fn)]
#![warn(missing_docs)]

#[macro_use]
pub mod boundary;
pub mod arrays;
pub mod codes;
pub mod convert;
mod inputs;
pub mod model;
pub mod results;
pub mod run;
pub mod threads;

pub use arrays::*;
pub use boundary::{ringmain_last_error, ringmain_live_handles, ringmain_status_text, ringmain_version};
pub use codes::*;
pub use model::*;
pub use results::*;
pub use run::*;
pub use threads::{ringmain_get_threads, ringmain_set_threads};
