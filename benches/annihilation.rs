//! Annihilation of a store of 10⁷ N = 2 particles (keys, sort, reduction, selection,
//! compaction) with the single-rank `Solo` comm, beside a `sort_unstable` of as many random
//! 64-bit keys (the baseline). Both run on one core (a one-thread rayon pool).
//!
//! The store is that of jobs/fermion-pair-coulomb.toml (relative cells, exchange-merged)
//! after a few intervals of advance without annihilation, so that the signed initial state
//! and the children of generation events share cells of both signs. Medians and the ratio
//! go to `scaling-results/bench-annihilation.csv`. `SIGNFOLD_BENCH_PARTICLES` sets the
//! store size (default 10⁷).

mod support;

use criterion::BenchmarkId;
use rand::{Rng, SeedableRng};
use signfold::advance::advance;
use signfold::annihilate::{CellMesh, annihilate};
use signfold::comm::Solo;
use signfold::rng::Stream;
use signfold::run;
use std::hint::black_box;
use std::time::{Duration, Instant};
use support::Record;

const INTERVALS: u64 = 4;

fn main() {
    let target: usize = std::env::var("SIGNFOLD_BENCH_PARTICLES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(10_000_000);
    let t0 = Instant::now();
    let set = [format!("numerics.particles={}", target / 2)];
    let setup = support::setup("fermion-pair-coulomb.toml", &set);
    let mesh = CellMesh::new(&setup).expect("cell mesh");
    let (state, _) = run::initial_state(&setup, &Solo).expect("initial particles");
    let mut store = state.store;
    let mut step = 0;
    while step < INTERVALS || store.len() < target {
        store = advance(&setup, &store, step).0;
        step += 1;
        if step > 50 {
            break;
        }
    }
    store.truncate(target);
    let minus = store.sign.iter().filter(|&&s| s < 0).count();
    let mut probe = store.clone();
    let rep = annihilate(&setup, &mesh, &mut probe, step, &Solo);
    drop(probe);
    println!(
        "store: {} particles after {step} intervals ({:.1} % negative), built in {:.1} s; \
         annihilation keeps {} in {} occupied cells ({:.1} % cancelled)",
        store.len(),
        100.0 * minus as f64 / store.len() as f64,
        t0.elapsed().as_secs_f64(),
        rep.after,
        rep.local_cells,
        100.0 * (rep.before - rep.after) as f64 / rep.before as f64
    );
    let n = store.len();
    let mut rs = Stream::seed_from_u64(1);
    let keys: Vec<u64> = (0..n).map(|_| rs.random()).collect();
    let pool = support::one_thread();
    let record = Record::default();

    let mut c = support::criterion();
    {
        let mut g = c.benchmark_group("annihilation");
        g.throughput(criterion::Throughput::Elements(n as u64));
        g.bench_function(BenchmarkId::from_parameter("sort-u64"), |b| {
            b.iter_custom(|iters| {
                let mut d = Duration::ZERO;
                for _ in 0..iters {
                    let mut v = keys.clone();
                    let t = Instant::now();
                    v.sort_unstable();
                    d += t.elapsed();
                    black_box(&v);
                }
                record.push("sort-u64", d, iters);
                d
            })
        });
        g.bench_function(BenchmarkId::from_parameter("annihilate"), |b| {
            b.iter_custom(|iters| {
                let mut d = Duration::ZERO;
                for _ in 0..iters {
                    let mut s = store.clone();
                    let t = Instant::now();
                    let r = pool.install(|| annihilate(&setup, &mesh, &mut s, step, &Solo));
                    d += t.elapsed();
                    black_box((r, &s));
                }
                record.push("annihilate", d, iters);
                d
            })
        });
        g.finish();
    }
    c.final_summary();

    let (Some(sort), Some(ann)) = (
        record.median("sort-u64", support::SAMPLES),
        record.median("annihilate", support::SAMPLES),
    ) else {
        return; // not measured (test mode or filtered): no summary
    };
    let rows = [
        format!("sort-u64,{n},{n},{n},1,{sort:.6},1.000"),
        format!(
            "annihilate,{n},{},{},1,{ann:.6},{:.3}",
            rep.after,
            rep.local_cells,
            ann / sort
        ),
    ];
    println!(
        "sort_unstable {:.1} ms, annihilate {:.1} ms: ratio {:.2}",
        sort * 1e3,
        ann * 1e3,
        ann / sort
    );
    support::write_csv(
        "bench-annihilation.csv",
        "case,particles_in,particles_out,occupied_cells,threads,median_seconds,ratio_to_sort",
        &rows,
    );
    println!("machine: {}", support::machine());
}
