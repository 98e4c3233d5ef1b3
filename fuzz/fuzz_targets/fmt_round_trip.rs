//! Text that parses cleanly formats to text that parses cleanly and formats to itself.
#![no_main]
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let text = String::from_utf8_lossy(data);
    let Ok(formatted) = costate_syntax::fmt::format_source(&text) else { return };
    match costate_syntax::fmt::format_source(&formatted) {
        Ok(again) => assert_eq!(again, formatted, "formatting is not idempotent"),
        Err(errors) => panic!("formatted text has syntax errors: {errors:?}\n{formatted}"),
    }
});
