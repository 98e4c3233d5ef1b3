//! `costate test`: solve every problem file with an `expect` block and compare.

use std::path::{Path, PathBuf};

use costate_lower::{ExpectTolerance, Target};
use costate_model::EndpointLayout;

use crate::exit;
use crate::pipeline::{self, LoadError, Loaded};
use crate::run;
use costate_driver::{report, Overrides};

pub fn run(paths: &[PathBuf], color: bool) -> u8 {
    let mut files = Vec::new();
    for path in paths {
        if let Err(e) = collect(path, &mut files) {
            eprintln!("error: {e}");
            return exit::USAGE;
        }
    }
    files.sort();
    let (mut failed, mut passed, mut tested) = (0usize, 0usize, 0usize);
    let mut rows: Vec<[String; 6]> = Vec::new();
    for file in &files {
        let loaded = match pipeline::load(file, color) {
            Ok(l) => l,
            Err(LoadError::Io(e)) => {
                eprintln!("error: {e}");
                return exit::USAGE;
            }
            Err(LoadError::Invalid { rendered, errors }) => {
                eprint!("{rendered}");
                println!("{}: {errors} error(s), not solved", file.display());
                failed += 1;
                continue;
            }
        };
        if loaded.lowered.expectations.is_empty() {
            continue;
        }
        tested += 1;
        let outcome = run::solve(&loaded, &Overrides::default(), None, true);
        let solution = match outcome {
            Ok(s) => s,
            Err(e) => {
                println!("{}: cannot solve: {e}", file.display());
                failed += 1;
                continue;
            }
        };
        let status = report::status_label(&solution.status);
        let solved = report::is_solved(&solution.status);
        if !solved {
            for d in costate_driver::findings(&loaded, &solution) {
                eprint!("{}", crate::render::terminal(&loaded.path, &loaded.source, &d, color));
            }
        }
        for e in &loaded.lowered.expectations {
            let found = evaluate(&loaded, e, &solution);
            let holds = solved && found.is_some_and(|f| e.tolerance.holds(e.value_si, f));
            if holds {
                passed += 1;
            } else {
                failed += 1;
            }
            let unit = e.unit.as_deref().map(|u| format!(" {u}")).unwrap_or_default();
            let user = |si: f64| report::sig(si / e.display_scale, 7);
            rows.push([
                format!("{}: {}", loaded.lowered.source_map.problem_name, e.text),
                format!("{}{unit}", user(e.value_si)),
                found.map(|f| format!("{}{unit}", user(f))).unwrap_or_else(|| "-".into()),
                match e.tolerance {
                    ExpectTolerance::Absolute(t) => format!("±{}{unit}", user(t)),
                    ExpectTolerance::Relative(f) => format!("±{}%", report::sig(f * 100.0, 3)),
                },
                if holds { "pass".into() } else { "FAIL".into() },
                if solved { String::new() } else { status.to_string() },
            ]);
        }
    }
    print_table(&rows);
    println!(
        "{passed} passed, {failed} failed ({tested} problem{} with expectations)",
        if tested == 1 { "" } else { "s" }
    );
    if failed > 0 {
        exit::FAILED
    } else {
        exit::OK
    }
}

fn evaluate(
    loaded: &Loaded,
    e: &costate_lower::LoweredExpectation,
    solution: &costate_solve::transcribe::OcpSolution,
) -> Option<f64> {
    match &e.target {
        Target::Cost => Some(report::user_cost(loaded, solution)),
        Target::Expr(function) => {
            let ocp = &loaded.lowered.ocp;
            let layout: EndpointLayout = ocp.endpoint_layout();
            let tr = &solution.trajectory;
            let mut inputs = vec![0.0; layout.len()];
            inputs[EndpointLayout::T0] = ocp.horizon.start;
            inputs[EndpointLayout::TF] = tr.end_time;
            for i in 0..layout.nx {
                inputs[layout.x0(i)] = *tr.states[i].first()?;
                inputs[layout.xf(i)] = *tr.states[i].last()?;
            }
            for i in 0..layout.np {
                inputs[layout.p(i)] = tr.params[i];
            }
            for i in 0..layout.nq {
                inputs[layout.q(i)] = *solution.integrals.get(i)?;
            }
            let mut out = [0.0];
            let mut ws = function.workspace();
            function.eval(&inputs, &mut out, &mut ws);
            out[0].is_finite().then_some(out[0])
        }
    }
}

fn print_table(rows: &[[String; 6]]) {
    let header = ["target", "expected", "found", "tolerance", "result", "status"];
    let mut widths = header.map(|h| h.chars().count());
    for row in rows {
        for (w, cell) in widths.iter_mut().zip(row) {
            *w = (*w).max(cell.chars().count());
        }
    }
    let line = |cells: [&str; 6]| {
        let parts: Vec<String> =
            cells.iter().zip(widths).map(|(c, w)| format!("{c:<w$}")).collect();
        println!("{}", parts.join("  ").trim_end());
    };
    line(header);
    for row in rows {
        line([&row[0], &row[1], &row[2], &row[3], &row[4], &row[5]]);
    }
}

/// `*.costate` files under a folder (recursively), or the file itself.
fn collect(path: &Path, out: &mut Vec<PathBuf>) -> Result<(), String> {
    let meta = std::fs::metadata(path)
        .map_err(|_| format!("cannot read `{}`: no such file or folder", path.display()))?;
    if meta.is_file() {
        out.push(path.to_path_buf());
        return Ok(());
    }
    let entries = std::fs::read_dir(path)
        .map_err(|e| format!("cannot read folder `{}`: {e}", path.display()))?;
    for entry in entries {
        let entry = entry.map_err(|e| format!("cannot read folder `{}`: {e}", path.display()))?;
        let p = entry.path();
        if p.is_dir() {
            collect(&p, out)?;
        } else if p.extension().is_some_and(|e| e == "costate") {
            out.push(p);
        }
    }
    Ok(())
}
