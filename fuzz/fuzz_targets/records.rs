//! libFuzzer target: see [`fuzz_support::records`] for what one input drives.
#![no_main]

libfuzzer_sys::fuzz_target!(|data: &[u8]| {
    let _ = fuzz_support::records(data);
});
