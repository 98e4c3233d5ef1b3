//! Any text through parse, check and lowering to the numeric problem (what `costate solve`
//! does before it solves): diagnostics or a problem, never a panic.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let text = String::from_utf8_lossy(data).into_owned();
    std::thread::Builder::new()
        .stack_size(costate_check::STACK_FOR_ANALYSIS)
        .spawn(move || {
            let _ = costate_driver::load("fuzz.costate".into(), text);
        })
        .expect("thread starts")
        .join()
        .expect("loading does not panic");
});
