//! The generated problem of about 2,000 lines shared by the checker's and the language
//! server's benchmarks (included with `#[path]`), so both measure the same text.

/// About `6 * states` lines: `states` pairs of states with a control, their dynamics and a
/// path constraint each.
pub fn generated(states: usize) -> String {
    let mut s = String::from("problem big\nconst {\n  g = 9.81 [m/s^2]\n  k = 0.5 [1/s]\n}\n");
    s.push_str("fn damp(a, b) = -k * a + b\n");
    s.push_str("time t [s]: start 0, end in 1 .. 60 guess 10\n");
    s.push_str("state {\n");
    for i in 0..states {
        s.push_str(&format!("  x{i} [m]: start 0, end in -1 .. 1, in -10 .. 10\n"));
        s.push_str(&format!("  v{i} [m/s]: start 0, end 0, in -2 .. 2, scale 1\n"));
    }
    s.push_str("}\ncontrol {\n");
    for i in 0..states {
        s.push_str(&format!("  a{i} [m/s^2]: in -1 .. 1, guess 0\n"));
    }
    s.push_str("}\ndynamics {\n");
    for i in 0..states {
        s.push_str(&format!("  x{i}' = v{i}\n"));
        s.push_str(&format!("  v{i}' = damp(v{i}, a{i}) - g * sin(x{i} / 1 [m]) * 0.01\n"));
    }
    s.push_str("}\ncost {\n  minimize end(t) + 0.01 * integral(");
    let terms: Vec<String> = (0..states).map(|i| format!("a{i}^2")).collect();
    s.push_str(&terms.join(" + "));
    s.push_str(")\n}\npath {\n");
    for i in 0..states {
        s.push_str(&format!("  c{i}: -3 <= x{i} + v{i} * 1 [s] <= 3\n"));
    }
    s.push_str("}\n");
    s
}
