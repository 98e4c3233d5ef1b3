//! `costate solve`: solve one problem, print the log and summary, write the solution files.

use std::path::{Path, PathBuf};

use costate_solve::transcribe::Trajectory;
use serde_json::Value;

use crate::pipeline::{self, LoadError, Loaded};
use crate::run;
use crate::{exit, files, render, Format};
use costate_driver::{report, Overrides};

pub struct SolveArgs {
    pub file: PathBuf,
    pub overrides: Overrides,
    pub out: PathBuf,
    pub format: Format,
    pub quiet: bool,
    pub warm: Option<PathBuf>,
}

pub fn run(args: &SolveArgs, color: bool) -> u8 {
    let loaded = match pipeline::load(&args.file, color) {
        Ok(l) => l,
        Err(LoadError::Io(e)) => {
            eprintln!("error: {e}");
            return exit::USAGE;
        }
        Err(LoadError::Invalid { rendered, errors }) => {
            eprint!("{rendered}");
            eprintln!("error: `{}` has {errors} error(s); nothing was solved", args.file.display());
            return exit::FAILED;
        }
    };
    let warm = match &args.warm {
        Some(path) => match read_warm_start(path, &loaded) {
            Ok(t) => Some(t),
            Err(e) => {
                eprintln!("error: {e}");
                return exit::USAGE;
            }
        },
        None => None,
    };
    if !args.quiet {
        for d in &loaded.warnings {
            eprint!("{}", render::terminal(&loaded.path, &loaded.source, d, color));
        }
    }
    let solution = match run::solve(&loaded, &args.overrides, warm.as_ref(), args.quiet) {
        Ok(s) => s,
        Err(e) => {
            eprintln!("error: cannot solve `{}`: {e}", args.file.display());
            return exit::USAGE;
        }
    };
    let intervals = costate_driver::ocp_settings(&loaded, &args.overrides).intervals;
    let findings = costate_driver::findings(&loaded, &solution);
    for d in &findings {
        eprint!("{}", render::terminal(&loaded.path, &loaded.source, d, color));
    }
    let names = report::output_names(&loaded.lowered.source_map.problem_name);
    let solved = report::is_solved(&solution.status);
    // Only a solved status replaces the solution files; any other ending is recorded beside
    // them, so the last good result is never overwritten by a failed attempt.
    let (document, shown, written) = if solved {
        let json_path = args.out.join(&names.solution);
        let csv_path = args.out.join(&names.table);
        let document = report::solution_json(&loaded, &solution, intervals);
        let text = serde_json::to_string_pretty(&document).expect("JSON values serialise");
        let csv = report::solution_csv(&loaded, &solution);
        let written = files::create_dir(&args.out).and_then(|_| {
            files::write_all_or_none(&[
                (json_path.as_path(), text.as_bytes()),
                (csv_path.as_path(), csv.as_bytes()),
            ])
        });
        (document, vec![json_path.display().to_string(), csv_path.display().to_string()], written)
    } else {
        let failed_path = args.out.join(&names.failed);
        let document = report::failed_json(&loaded, &solution, intervals, &findings);
        let text = serde_json::to_string_pretty(&document).expect("JSON values serialise");
        let written = files::create_dir(&args.out)
            .and_then(|_| files::write_atomic(&failed_path, text.as_bytes()));
        (document, vec![failed_path.display().to_string()], written)
    };
    if let Err(e) = written {
        eprintln!("error: {e}");
        return exit::USAGE;
    }
    match args.format {
        Format::Text => {
            println!("{}", report::summary(&loaded, &solution, intervals, &shown));
            let earlier: Vec<String> = [&names.solution, &names.table]
                .iter()
                .map(|n| args.out.join(n))
                .filter(|p| !solved && p.exists())
                .map(|p| p.display().to_string())
                .collect();
            if !earlier.is_empty() {
                println!(
                    "kept        {} (an unsolved result replaces nothing)",
                    earlier.join(", ")
                );
            }
        }
        Format::Json => {
            let mut summary = document;
            if let Value::Object(map) = &mut summary {
                map.insert("files".into(), serde_json::json!(shown));
            }
            println!("{}", serde_json::to_string_pretty(&summary).expect("JSON values serialise"));
        }
    }
    if solved {
        exit::OK
    } else {
        exit::FAILED
    }
}

/// A previous solution file of the same problem, converted back to SI, as a starting point.
fn read_warm_start(path: &Path, loaded: &Loaded) -> Result<Trajectory, String> {
    let text = files::read_source(path).map_err(|e| e.to_string())?;
    let doc: Value = serde_json::from_str(&text)
        .map_err(|e| format!("`{}` is not a solution file: {e}", path.display()))?;
    let bad = |what: &str| format!("`{}` is not a usable solution file: {what}", path.display());
    let map = &loaded.lowered.source_map;
    let numbers =
        |v: &Value| -> Option<Vec<f64>> { v.as_array()?.iter().map(Value::as_f64).collect() };
    let find = |list: &str, name: &str| -> Option<Value> {
        doc[list].as_array()?.iter().find(|e| e["name"] == name).cloned()
    };
    let times: Vec<f64> = numbers(&doc["time"]["values"])
        .ok_or_else(|| bad("no `time.values`"))?
        .into_iter()
        .map(|t| map.time.to_si(t))
        .collect();
    let mut states = Vec::new();
    for s in &map.states {
        let entry =
            find("states", &s.name).ok_or_else(|| bad(&format!("no state `{}`", s.name)))?;
        let values = numbers(&entry["values"])
            .ok_or_else(|| bad(&format!("state `{}` has no values", s.name)))?;
        states.push(values.into_iter().map(|v| s.to_si(v)).collect());
    }
    let mut controls = Vec::new();
    for c in &map.controls {
        let entry =
            find("controls", &c.name).ok_or_else(|| bad(&format!("no control `{}`", c.name)))?;
        let values = numbers(&entry["values"])
            .ok_or_else(|| bad(&format!("control `{}` has no values", c.name)))?;
        controls.push(values.into_iter().map(|v| c.to_si(v)).collect());
    }
    let mut params = Vec::new();
    for p in &map.params {
        let entry =
            find("params", &p.name).ok_or_else(|| bad(&format!("no parameter `{}`", p.name)))?;
        params
            .push(p.to_si(entry["value"].as_f64().ok_or_else(|| bad("parameter without value"))?));
    }
    let end_time =
        doc["end_time"].as_f64().map(|t| map.time.to_si(t)).ok_or_else(|| bad("no `end_time`"))?;
    Ok(Trajectory { times, states, controls, params, end_time })
}
