//! The server's settings, from `initializationOptions` or `workspace/didChangeConfiguration`,
//! section `costate`: `solveOnSave` (bool, default true) and `solveIntervals` (number or null:
//! overrides the file's `intervals`). The VS Code extension writes exactly these keys.

use serde_json::Value;

#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Config {
    pub solve_on_save: bool,
    pub solve_intervals: Option<usize>,
}

impl Default for Config {
    fn default() -> Self {
        Config { solve_on_save: true, solve_intervals: None }
    }
}

/// Most intervals accepted from the editor, as the CLI's `--intervals` allows.
const MAX_INTERVALS: u64 = 100_000;

impl Config {
    /// Apply the keys present in `value` (the section itself or an object holding a `costate`
    /// section); keys that are absent or of the wrong type leave the setting as it was.
    pub fn update(&mut self, value: &Value) {
        let section = value.get("costate").unwrap_or(value);
        if let Some(on) = section.get("solveOnSave").and_then(Value::as_bool) {
            self.solve_on_save = on;
        }
        match section.get("solveIntervals") {
            Some(Value::Null) => self.solve_intervals = None,
            Some(v) => {
                if let Some(n) = v.as_u64().filter(|n| (1..=MAX_INTERVALS).contains(n)) {
                    self.solve_intervals = Some(n as usize);
                }
            }
            None => {}
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

    #[test]
    fn reads_the_section_or_a_wrapper_and_ignores_bad_values() {
        let mut c = Config::default();
        c.update(&json!({ "costate": { "solveOnSave": false, "solveIntervals": 12 } }));
        assert_eq!(c, Config { solve_on_save: false, solve_intervals: Some(12) });
        c.update(&json!({ "solveIntervals": null }));
        assert_eq!(c.solve_intervals, None);
        c.update(&json!({ "solveIntervals": -3, "solveOnSave": "yes" }));
        assert_eq!(c, Config { solve_on_save: false, solve_intervals: None });
    }
}
