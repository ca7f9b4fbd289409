//! Speed of sizing, tolerance statistics and sweeps (a benchmark, not a test).
//! Targets (issue): 100 000 spread samples < 2 s on 2 cores; sizing < 0.5 s; 100-point sweep < 0.1 s.
use criterion::{Criterion, criterion_group, criterion_main};
use dynode::design;
use dynode::study::{sizing, spread, sweep};

fn demo() -> design::Design {
    design::load(std::path::Path::new(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/designs/rooftop-paddle.ron"
    )))
    .expect("demo design")
}

fn bench(c: &mut Criterion) {
    let d = demo();
    let mut g = c.benchmark_group("size");
    g.sample_size(10);
    for samples in [10_000usize, 100_000] {
        let cfg = spread::SpreadConfig {
            samples,
            ..spread::SpreadConfig::default()
        };
        g.bench_function(format!("spread {samples} samples"), |b| {
            b.iter(|| spread::run(&d, &cfg, &|_| {}).expect("spread"))
        });
    }
    let text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/designs/requirements/paddle-rebuild.ron"
    ))
    .expect("demo requirements");
    let req = sizing::parse_requirements(&text, "demo").expect("requirements");
    g.bench_function("sizing the demo requirements", |b| {
        b.iter(|| sizing::size(&req).expect("size"))
    });
    let axis = sweep::parse_axis("supply.volts=900V..1500V:100").expect("axis");
    g.bench_function("sweep 100 points", |b| {
        b.iter(|| sweep::run(&d, std::slice::from_ref(&axis)))
    });
    g.finish();
}

criterion_group! {
    name = benches;
    // No plots: criterion's charts need system fonts, which a fresh machine may lack.
    config = Criterion::default().without_plots();
    targets = bench
}
criterion_main!(benches);
