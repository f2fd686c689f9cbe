#![allow(missing_docs)]
//! Benchmarks of the balance solve (DESIGN §5: ≥ 1 million solves per second per core for a
//! 6-component liquid mixture). Run with `cargo bench --bench solve`.

use std::hint::black_box;

use criterion::{Criterion, Throughput, criterion_group, criterion_main};
use efftemp::thermo::balance::{
    Basis, DEFAULT_BOUNDS, Effluent, FeedInput, FlowValue, Inputs, System, Unknown,
};
use efftemp::thermo::enthalpy::EnthalpyPath;
use efftemp::thermo::{Library, PathChoice, Reaction};

const IDS: [&str; 6] = ["water", "methyl-acetate", "methanol", "acetic-acid", "ethanol", "acetone"];

fn system(path: EnthalpyPath) -> System {
    let lib = Library::builtin().expect("built-in library");
    let comps = IDS.iter().map(|id| lib.resolve(id).expect("component")).collect();
    let reaction = Reaction { label: "hydrolysis".into(), nu: vec![-1.0, -1.0, 1.0, 1.0, 0.0, 0.0], key: 1 };
    System::new(comps, &[PathChoice::Force(path); 6], None, vec![reaction], DEFAULT_BOUNDS).expect("system")
}

fn inputs() -> Inputs {
    Inputs {
        feeds: vec![FeedInput {
            flow: FlowValue::Molar(10.7),
            temperature: 320.0,
            fractions: vec![0.60, 0.28, 0.05, 0.02, 0.03, 0.02],
            basis: Basis::Mole,
        }],
        effluent: Effluent::Reacted { conversions: vec![Some(0.42)] },
        duty: Some(150_000.0),
        heat_loss: 2_000.0,
        effluent_temperature: Some(336.0),
        pressure: None,
        bubble_margin: 10.0,
    }
}

fn bench(c: &mut Criterion) {
    // Throughput in solves per second (criterion's "elem/s"): the target is 1 M/s.
    let mut c = c.benchmark_group("6-component");
    c.throughput(Throughput::Elements(1));
    for (name, path) in
        [("liquid-cp", EnthalpyPath::LiquidCp), ("ideal-gas-watson", EnthalpyPath::IdealGasWatson)]
    {
        let sys = system(path);
        let inp = inputs();
        let feed = sys.feed_flows(&inp.feeds[0]);
        let mut out = feed.clone();
        let xi = 0.42 * feed[1];
        for (o, nu) in out.iter_mut().zip(&sys.reactions[0].nu) {
            *o += nu * xi;
        }
        let target = sys.stream_h(&feed, 320.0) + 150_000.0 - 2_000.0;
        // The hot path: enthalpy target to effluent temperature, no allocation.
        c.bench_function(format!("solve_temperature/{name}"), |b| {
            b.iter(|| sys.solve_temperature(black_box(&out), black_box(target), black_box(320.0)))
        });
        // Inlet enthalpy plus the solve, as a service interval does per prediction.
        c.bench_function(format!("balance/{name}"), |b| {
            b.iter(|| {
                let t = sys.stream_h(black_box(&feed), black_box(320.0)) + 148_000.0;
                sys.solve_temperature(black_box(&out), t, 320.0)
            })
        });
        // The full solve with material balance, heats of reaction, element balance and flags.
        c.bench_function(format!("full_solve/{name}"), |b| {
            b.iter(|| sys.solve(black_box(&inp), Unknown::Temperature))
        });
    }
    c.finish();
}

criterion_group!(benches, bench);
criterion_main!(benches);
