//! Checks of the committed header against the crate, and of the C functions called from Rust.
//!
//! The C tests in `bindings/c/` exercise the library through the header; these run with
//! `cargo test` and keep the header's version and declarations honest.

use ringmain::*;
use std::ffi::{c_char, CStr, CString};
use std::ptr;

const HEADER: &str = include_str!("../include/ringmain.h");

fn define(name: &str) -> String {
    let prefix = format!("#define {name} ");
    HEADER
        .lines()
        .find_map(|l| l.strip_prefix(&prefix))
        .unwrap_or_else(|| panic!("ringmain.h has no #define {name}"))
        .trim()
        .to_owned()
}

#[test]
fn header_version_defines_match_the_package_version() {
    let hint = "edit the version defines in ffi/cbindgen.toml and regenerate the header";
    assert_eq!(define("RINGMAIN_VERSION_MAJOR"), env!("CARGO_PKG_VERSION_MAJOR"), "{hint}");
    assert_eq!(define("RINGMAIN_VERSION_MINOR"), env!("CARGO_PKG_VERSION_MINOR"), "{hint}");
    assert_eq!(define("RINGMAIN_VERSION_PATCH"), env!("CARGO_PKG_VERSION_PATCH"), "{hint}");
    assert_eq!(define("RINGMAIN_VERSION"), format!("\"{}\"", env!("CARGO_PKG_VERSION")), "{hint}");
    // SAFETY: ringmain_version returns a static NUL-terminated string.
    let runtime = unsafe { CStr::from_ptr(ringmain_version()) }.to_str().unwrap();
    assert_eq!(runtime, env!("CARGO_PKG_VERSION"));
}

#[test]
fn header_declares_every_status_code_with_its_value() {
    for &s in ringmain_status::ALL {
        let line = format!("{s:?} = {},", s as u32);
        assert!(HEADER.contains(&line), "ringmain.h lacks `{line}`: regenerate it with cbindgen");
    }
}

#[test]
fn handles_can_move_between_threads_and_be_read_from_several() {
    // What the header promises: a handle may move to another thread (Send), and several threads
    // may use one handle through the functions taking a const pointer (Sync).
    fn sendable<T: Send + Sync>() {}
    sendable::<ringmain_model>();
    sendable::<ringmain_results>();
}

fn last_error() -> String {
    let mut buf = vec![0 as c_char; 4096];
    let mut needed = 0usize;
    // SAFETY: a buffer of buf.len() bytes and a valid `needed`.
    let s = unsafe { ringmain_last_error(buf.as_mut_ptr(), buf.len(), &mut needed) };
    assert_eq!(s, ringmain_status::RINGMAIN_OK);
    // SAFETY: the function wrote a NUL-terminated string.
    unsafe { CStr::from_ptr(buf.as_ptr()) }.to_str().unwrap().to_owned()
}

const TWO_PIPES: &str = r#"
[[nodes]]
id = "Source"
kind = "reservoir"
head = 50.0
[[nodes]]
id = "J-1"
elevation = 10.0
demand = 5.0
[[nodes]]
id = "J-2"
elevation = 12.0
demand = 3.0
[[links]]
id = "P-1"
from = "Source"
to = "J-1"
length = 400.0
diameter = 150
roughness = 120
[[links]]
id = "P-2"
from = "J-1"
to = "J-2"
length = 300.0
diameter = 100
roughness = 110
"#;

fn load(text: &str) -> *mut ringmain_model {
    let mut m = ptr::null_mut();
    // SAFETY: text and out are valid.
    let s = unsafe { ringmain_model_from_toml(text.as_ptr().cast(), text.len(), &mut m) };
    assert_eq!(s, ringmain_status::RINGMAIN_OK, "{}", last_error());
    m
}

#[test]
fn solve_and_read_a_small_model() {
    let m = load(TWO_PIPES);
    let mut r = ptr::null_mut();
    // SAFETY: live handles and valid outputs throughout.
    unsafe {
        assert_eq!(ringmain_model_solve(m, &mut r), ringmain_status::RINGMAIN_OK, "{}", last_error());
        let mut flows = [0.0f64; 2];
        let mut count = 0usize;
        assert_eq!(ringmain_results_flows(r, flows.as_mut_ptr(), 2, &mut count), ringmain_status::RINGMAIN_OK);
        assert_eq!(count, 2);
        // Mass balance: P-1 carries both demands, P-2 the last one (L/s, the model's unit).
        assert!((flows[0] - 8.0).abs() < 1e-9 && (flows[1] - 3.0).abs() < 1e-9, "{flows:?}");
        // Too small a buffer: nothing copied, the count needed reported.
        let mut one = [f64::NAN; 1];
        let s = ringmain_results_heads(r, one.as_mut_ptr(), 1, &mut count);
        assert_eq!(s, ringmain_status::RINGMAIN_BUFFER_TOO_SMALL);
        assert_eq!(count, 3);
        assert!(one[0].is_nan());
        ringmain_results_free(r);
        ringmain_model_free(m);
    }
}

#[test]
fn bad_input_is_an_error_code_never_undefined_behaviour() {
    let m = load(TWO_PIPES);
    // SAFETY: NULL and bad values are what is being tested; every other pointer is valid.
    unsafe {
        let mut out = 0usize;
        assert_eq!(ringmain_model_node_count(ptr::null(), &mut out), ringmain_status::RINGMAIN_NULL_POINTER);
        assert!(last_error().contains("'model' is NULL"), "{}", last_error());
        assert_eq!(ringmain_model_node_count(m, ptr::null_mut()), ringmain_status::RINGMAIN_NULL_POINTER);
        assert_eq!(ringmain_model_set_demand(m, 99, 1.0), ringmain_status::RINGMAIN_OUT_OF_RANGE);
        assert!(last_error().contains("node index 99 is out of range (valid: 0 to 2)"), "{}", last_error());
        assert_eq!(ringmain_model_set_link_status(m, 0, 7), ringmain_status::RINGMAIN_INVALID_ARGUMENT);
        assert!(last_error().contains("7 is not a valid link status"), "{}", last_error());
        assert_eq!(ringmain_model_set_demand(m, 0, 1.0), ringmain_status::RINGMAIN_WRONG_KIND);
        assert!(last_error().contains("node 'Source': key 'demand'"), "{}", last_error());
        assert_eq!(ringmain_model_set_demand(m, 1, f64::NAN), ringmain_status::RINGMAIN_MODEL_INVALID);
        assert!(last_error().contains("node 'J-1': key 'demand': must be a number"), "{}", last_error());
        let id = CString::new("J-9").unwrap();
        assert_eq!(ringmain_model_node_index(m, id.as_ptr(), &mut out), ringmain_status::RINGMAIN_NOT_FOUND);
        assert!(last_error().contains("did you mean 'J-1'?"), "{}", last_error());
        let bytes = [0x66u8, 0xff, 0x00];
        assert_eq!(
            ringmain_model_node_index(m, bytes.as_ptr().cast(), &mut out),
            ringmain_status::RINGMAIN_INVALID_ARGUMENT
        );
        ringmain_model_free(m);
        ringmain_model_free(ptr::null_mut());
        ringmain_results_free(ptr::null_mut());
    }
}
