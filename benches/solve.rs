//! Speed of the DC solve and the linearity curve (a benchmark, not a test).
use criterion::{Criterion, criterion_group, criterion_main};
use dynode::design;
use dynode::model::tube::TubeModel;
use dynode::solve::linearity;
use dynode::solve::network::{Network, Workspace};

fn chain(stages: usize) -> Network {
    let gaps = vec!["R(\"470k\")"; stages + 1].join(", ");
    let text = format!(
        r#"(name: "bench", tube: (stages: {stages},
            gain: Reference(volts: "1200 V", gain: 1e6, exponent: Some(0.75)),
            limits: (max_supply: "3000 V", max_anode_current: "1 mA"),
            pulse_linearity: Some((peak_current: "30 mA", last_gap: "100 V"))),
          supply: (volts: "-1200 V", polarity: CathodeNegative),
          divider: (gaps: [{gaps}]), load: (resistance: "50 ohm"))"#
    );
    let d = design::parse_str(&text, "bench.ron").unwrap();
    Network::from_design(&d, TubeModel::from_spec(&d.tube).unwrap())
}

fn bench(c: &mut Criterion) {
    for stages in [10usize, 16] {
        let net = chain(stages);
        let (i0, _) = net.quiescent();
        let ik = 0.05 * i0 / net.small_signal_gain();
        let mut ws = Workspace::default();
        c.bench_function(&format!("dc_solve_{stages}_stage_cold"), |b| {
            b.iter(|| {
                net.solve_raw(std::hint::black_box(ik), None, &mut ws)
                    .unwrap()
            })
        });
        let start = net.solve_raw(ik * 0.9, None, &mut ws).unwrap();
        c.bench_function(&format!("dc_solve_{stages}_stage_warm"), |b| {
            b.iter(|| {
                net.solve_raw(std::hint::black_box(ik), Some(&start), &mut ws)
                    .unwrap()
            })
        });
    }
    let net = chain(10);
    let mut ws = Workspace::default();
    c.bench_function("linearity_curve_200_points_10_stage", |b| {
        b.iter(|| linearity::trace(&net, &mut ws).unwrap())
    });
}

criterion_group! {
    name = benches;
    // No plots: criterion's charts need system fonts, which a fresh machine may lack.
    config = Criterion::default().without_plots();
    targets = bench
}
criterion_main!(benches);
