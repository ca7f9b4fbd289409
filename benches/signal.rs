//! Speed of the signal budget: a 40-point load sweep with a computed waveform at every load
//! (a benchmark, not a test). Target: under 50 ms.
use criterion::{Criterion, criterion_group, criterion_main};
use dynode::budget::signal;
use dynode::{analysis, design};

fn bench(c: &mut Criterion) {
    for demo in ["rooftop-paddle", "laser-timing", "photon-counter-positive"] {
        let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
            .join("designs")
            .join(format!("{demo}.ron"));
        let d = design::load(&path).unwrap();
        let a = analysis::analyse(&d).unwrap();
        let s = a.signal.as_ref().unwrap();
        c.bench_function(&format!("load_sweep_40_{demo}"), |b| {
            b.iter(|| {
                signal::load_sweep(
                    &d,
                    std::hint::black_box(&s.current),
                    40,
                    Some(s.photoelectrons),
                    None,
                )
            })
        });
    }
}

criterion_group! {
    name = benches;
    config = Criterion::default().sample_size(10).without_plots();
    targets = bench
}
criterion_main!(benches);
