//! Criterion benchmarks of whole solves, from the lowered problem to the solution (parsing and
//! checking are done once, outside the timed part): the crane example at 100 and 10,000
//! intervals, Goddard's rocket at 200, particle steering at 100 and the hang glider at 100,
//! each with the file's own settings but for the intervals.
//!
//! Run with `cargo bench -p costate-driver --bench solve` (release profile; pass a name to
//! run one, e.g. `cargo bench -p costate-driver --bench solve -- crane_100`). Wall times on a
//! shared machine are noisy: `scripts/instructions.sh` counts instructions instead, which
//! repeat exactly. Timings are only ever measured here, never asserted in tests.

use std::sync::atomic::AtomicBool;
use std::sync::Arc;
use std::time::Duration;

use costate_driver::{load, solve, Loaded, Overrides};
use criterion::{criterion_group, criterion_main, Criterion};

/// The problems, as (benchmark name, file, intervals, sample count).
const CASES: &[(&str, &str, usize, usize)] = &[
    ("crane_100", "examples/crane_transfer.costate", 100, 50),
    ("crane_10000", "examples/crane_transfer.costate", 10_000, 10),
    ("goddard_200", "tests/fixtures/references/goddard_rocket.costate", 200, 20),
    ("particle_100", "tests/fixtures/references/particle_steering.costate", 100, 50),
    ("hang_glider_100", "tests/fixtures/references/hang_glider.costate", 100, 30),
];

fn source(file: &str) -> String {
    match file {
        "examples/crane_transfer.costate" => {
            include_str!("../../../examples/crane_transfer.costate").to_string()
        }
        "tests/fixtures/references/goddard_rocket.costate" => {
            include_str!("../../../tests/fixtures/references/goddard_rocket.costate").to_string()
        }
        "tests/fixtures/references/particle_steering.costate" => {
            include_str!("../../../tests/fixtures/references/particle_steering.costate").to_string()
        }
        "tests/fixtures/references/hang_glider.costate" => {
            include_str!("../../../tests/fixtures/references/hang_glider.costate").to_string()
        }
        other => panic!("no benchmark source for {other}"),
    }
}

fn loaded(file: &str) -> Loaded {
    match load(file.to_string(), source(file)) {
        Ok(l) => l,
        Err(d) => panic!("{file} does not check: {d:?}"),
    }
}

fn solves(c: &mut Criterion) {
    for &(name, file, intervals, samples) in CASES {
        let problem = loaded(file);
        let overrides = Overrides { intervals: Some(intervals) };
        let mut group = c.benchmark_group("solve");
        group.sample_size(samples.max(10));
        group.measurement_time(Duration::from_secs(if intervals > 1000 { 60 } else { 10 }));
        // Only runs when the benchmark is selected.
        group.bench_function(name, |b| {
            // One solve outside the timing: its status and iterations go beside the times.
            let first = solve(&problem, &overrides, None, Arc::default(), &mut |_| {})
                .unwrap_or_else(|e| panic!("{name}: {e}"));
            eprintln!("{name}: {:?} in {} iterations", first.status, first.iterations);
            b.iter(|| {
                let cancel = Arc::new(AtomicBool::new(false));
                solve(&problem, &overrides, None, cancel, &mut |_| {}).expect("a solve")
            })
        });
        group.finish();
    }
}

criterion_group!(benches, solves);
criterion_main!(benches);
