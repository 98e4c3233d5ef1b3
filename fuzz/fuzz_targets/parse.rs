//! Any bytes as text: the parser returns a tree and diagnostics, never panics.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let text = String::from_utf8_lossy(data);
    let parse = costate_syntax::parse(&text);
    for d in &parse.diagnostics {
        assert!(d.primary.span.start <= d.primary.span.end && d.primary.span.end <= text.len());
    }
});
