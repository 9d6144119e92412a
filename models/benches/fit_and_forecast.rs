//! Fits and forecasts 100,000 simulated vehicle-axle-components, against a baseline measured
//! in the same run: the plain least-squares fit alone (no prior, no forecast).
//!
//! Run: `CARGO_TARGET_DIR=/work/target-models cargo bench -p brakeledger-models`

#![allow(missing_docs)] // criterion_group! generates an undocumented function

use std::hint::black_box;
use std::time::Duration;

use brakeledger_models::calibration::repeated_fleet_inputs;
use brakeledger_models::pipeline::forecast_parts;
use brakeledger_models::{fit_part, ForecastSettings};
use criterion::{criterion_group, criterion_main, Criterion};

const PARTS: usize = 100_000;

fn bench(c: &mut Criterion) {
    let (inputs, today) = repeated_fleet_inputs(PARTS);
    let settings = ForecastSettings::default();
    let mut group = c.benchmark_group("fit_and_forecast_100k_parts");
    group.sample_size(10).warm_up_time(Duration::from_secs(1)).measurement_time(Duration::from_secs(20));
    group.bench_function("baseline_ols_fit_only", |b| {
        b.iter(|| {
            let ok = inputs.iter().filter(|p| fit_part(&p.history, &settings).is_ok()).count();
            black_box(ok)
        })
    });
    group.bench_function("full_pipeline_fit_pool_forecast", |b| {
        b.iter(|| black_box(forecast_parts(&inputs, today, &settings).len()))
    });
    group.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
