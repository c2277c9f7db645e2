#![allow(missing_docs)] // criterion_group! generates undocumented items
//! One hold evaluation with each backend: fixed point, f32, f64 reference.
//! `cargo bench -p host-check --bench hold`

use std::hint::black_box;

use criterion::{criterion_group, criterion_main, Criterion};
use host_check::reference::{self, StageF};
use rc_model::{float, Diode, Model, Span, Stage};

fn stage(diode: Diode) -> Stage {
    Stage {
        vdd_uv: 5_000_000,
        r_mohm: 1_000_000_000,
        c_ff: 1_000_000_000,
        series_mohm: 0,
        charge_mohm: 100_000,
        driver_mohm: 50_000,
        leak_mohm: None,
        leak_fa: 0,
        diode,
        rise_uv: 2_900_000,
        fall_uv: 2_100_000,
        press_ns: 100_000_000,
        temp_mdeg_c: 25_000,
    }
}

fn bench(c: &mut Criterion) {
    for (label, diode) in [
        ("drop", Diode::Drop { drop_uv: 600_000 }),
        ("junction", Diode::Junction { is_fa: 2_500_000, n_milli: 1_750, rs_mohm: 500 }),
    ] {
        let s = stage(diode);
        let mut g = c.benchmark_group(format!("hold/{label}"));
        g.bench_function("fixed", |b| b.iter(|| Model::new(black_box(&s)).and_then(|m| m.evaluate())));
        g.bench_function("f32", |b| b.iter(|| float::Model::new(black_box(&s)).and_then(|m| m.evaluate())));
        let sf = StageF::from(&s);
        g.bench_function("f64", |b| b.iter(|| reference::evaluate(black_box(&sf))));
        g.finish();
    }
    let s = stage(Diode::Drop { drop_uv: 600_000 });
    let m = Model::new(&s).unwrap_or_else(|e| panic!("{e}"));
    let measured = Span::from_ns(700_000_000);
    c.bench_function("inverse_c/drop/fixed", |b| b.iter(|| m.inverse_c(black_box(measured))));
}

criterion_group!(benches, bench);
criterion_main!(benches);
