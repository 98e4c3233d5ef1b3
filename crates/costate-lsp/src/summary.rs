//! The solution document (docs/solution-format.md) read back as the IDE layer's
//! [`SolveSummary`]: the editor shows exactly what the file on disk says.

use std::collections::HashMap;

use costate_ide::{SolveSummary, VariableResult};
use serde_json::Value;

/// A multiplier larger than this (SI) marks a constraint as active; smaller ones are the
/// interior-point QP's residue on inactive rows.
const ACTIVE_MULTIPLIER: f64 = 1e-7;

pub fn from_document(doc: &Value) -> SolveSummary {
    let numbers = |v: &Value| -> Vec<f64> {
        v.as_array().map(|a| a.iter().filter_map(Value::as_f64).collect()).unwrap_or_default()
    };
    let mut variables = HashMap::new();
    let mut series = |entry: &Value| {
        let values = numbers(&entry["values"]);
        if let (Some(name), Some(first), Some(last)) =
            (entry["name"].as_str(), values.first(), values.last())
        {
            let min = values.iter().copied().fold(f64::INFINITY, f64::min);
            let max = values.iter().copied().fold(f64::NEG_INFINITY, f64::max);
            variables
                .insert(name.to_string(), VariableResult { start: *first, end: *last, min, max });
        }
    };
    series(&doc["time"]);
    for list in ["states", "controls"] {
        doc[list].as_array().into_iter().flatten().for_each(&mut series);
    }
    for p in doc["params"].as_array().into_iter().flatten() {
        if let (Some(name), Some(v)) = (p["name"].as_str(), p["value"].as_f64()) {
            variables.insert(name.to_string(), VariableResult { start: v, end: v, min: v, max: v });
        }
    }
    let mut constraints_active = HashMap::new();
    for c in doc["path_constraints"].as_array().into_iter().flatten() {
        if let Some(label) = c["label"].as_str() {
            let active = numbers(&c["multipliers"]).iter().any(|m| m.abs() > ACTIVE_MULTIPLIER);
            let entry = constraints_active.entry(label.to_string()).or_insert(false);
            *entry |= active;
        }
    }
    for c in doc["boundary_constraints"].as_array().into_iter().flatten() {
        if let Some(label) = c["label"].as_str() {
            let active = c["multiplier"].as_f64().is_some_and(|m| m.abs() > ACTIVE_MULTIPLIER);
            let entry = constraints_active.entry(label.to_string()).or_insert(false);
            *entry |= active;
        }
    }
    SolveSummary {
        status: doc["status"].as_str().unwrap_or("unknown").to_string(),
        solved: doc["solved"].as_bool().unwrap_or(false),
        cost: doc["cost"].as_f64().unwrap_or(f64::NAN),
        iterations: doc["iterations"].as_u64().unwrap_or(0),
        seconds: doc["timing_seconds"]["total"].as_f64().unwrap_or(0.0),
        variables,
        constraints_active,
    }
}
