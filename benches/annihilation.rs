//! Annihilation of a store of 10⁷ N = 2 particles (keys, sort, reduction, selection,
//! compaction) with the single-rank `Solo` comm, beside a `sort_unstable` of as many random
//! 64-bit keys (the baseline). Both run on one core (a one-thread rayon pool).
//!
//! The store is that of jobs/fermion-pair-coulomb.toml (relative cells, exchange-merged)
//! after a few intervals of advance without annihilation, so that the signed initial state
//! and the children of generation events share cells of both signs. After criterion's own
//! report, both cases run again in interleaved rounds (the machine is shared and noisy);
//! those medians and the ratio go to `scaling-results/bench-annihilation.csv`. `SIGNFOLD_BENCH_PARTICLES` sets the
//! store size (default 10⁷).

mod support;

use criterion::BenchmarkId;
use rand::{Rng, SeedableRng};
use signfold::engine::annihilate::{CellMesh, annihilate};
use signfold::engine::comm::Solo;
use signfold::engine::start;
use signfold::physics::flight::advance;
use signfold::physics::rng::Stream;
use std::hint::black_box;
use std::time::{Duration, Instant};

/// Intervals of advance (at least) before the store is cut to size.
const INTERVALS: u64 = 4;
/// Interleaved rounds behind the CSV summary.
const ROUNDS: usize = 7;

fn main() {
    let target: usize = std::env::var("SIGNFOLD_BENCH_PARTICLES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(10_000_000);
    let t0 = Instant::now();
    let set = [format!("numerics.particles={}", target / 2)];
    let setup = support::setup("fermion-pair-coulomb.toml", &set);
    let mesh = CellMesh::new(&setup).expect("cell mesh");
    let (state, _) = start::initial_state(&setup, &Solo).expect("initial particles");
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
    // Unchanged by any change to annihilate that keeps its behaviour bit-identical.
    let print = support::fingerprint(&probe);
    drop(probe);
    println!(
        "store: {} particles after {step} intervals ({:.1} % negative), built in {:.1} s; \
         annihilation keeps {} in {} occupied cells ({:.1} % cancelled), fingerprint {print:016x}",
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

    // The cases; each returns the time of its measured part (the copy of the input is not).
    let mut sort = || {
        let mut v = keys.clone();
        let t = Instant::now();
        v.sort_unstable();
        let d = t.elapsed();
        black_box(&v);
        d
    };
    let mut ann = || {
        let mut s = store.clone();
        let t = Instant::now();
        let r = pool.install(|| annihilate(&setup, &mesh, &mut s, step, &Solo));
        let d = t.elapsed();
        black_box((r, &s));
        d
    };
    let names = ["sort-u64", "annihilate"];
    let mut cases: [&mut dyn FnMut() -> Duration; 2] = [&mut sort, &mut ann];

    let mut c = support::criterion();
    {
        let mut g = c.benchmark_group("annihilation");
        g.throughput(criterion::Throughput::Elements(n as u64));
        for (name, case) in names.iter().zip(cases.iter_mut()) {
            g.bench_function(BenchmarkId::from_parameter(name), |b| {
                b.iter_custom(|iters| (0..iters).map(|_| case()).sum())
            });
        }
        g.finish();
    }
    c.final_summary();
    if support::test_mode() {
        return;
    }

    // The summary: interleaved rounds, so that the ratio compares like with like.
    let m = support::interleaved(ROUNDS, &mut cases);
    let (sort, ann) = (m[0], m[1]);
    let rows = [
        format!("sort-u64,{n},{n},,1,{sort:.6},1.000"),
        format!(
            "annihilate,{n},{},{},1,{ann:.6},{:.3}",
            rep.after,
            rep.local_cells,
            ann / sort
        ),
    ];
    println!(
        "interleaved medians of {ROUNDS} rounds, one thread: sort_unstable {:.1} ms, annihilate {:.1} ms: ratio {:.2}",
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
