//! Any text through parser and checker, on a stack the size the shells give analysis.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let text = String::from_utf8_lossy(data).into_owned();
    std::thread::Builder::new()
        .stack_size(costate_check::STACK_FOR_ANALYSIS)
        .spawn(move || {
            let parse = costate_syntax::parse(&text);
            let analysis = costate_check::check(&parse.file);
            for d in &analysis.diagnostics {
                assert!(d.primary.span.end <= text.len(), "{d:?}");
            }
        })
        .expect("thread starts")
        .join()
        .expect("the checker does not panic");
});
