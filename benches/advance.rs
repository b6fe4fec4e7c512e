//! Advance of N = 2 particles over one synchronisation interval, per core, beside a plain
//! read-and-write pass over the same arrays (the raw-bandwidth baseline):
//! - `plain-pass`: read x, k, id, sign of every particle, write x + v·dt (and k, id, sign)
//!   into a second store of the same layout, allocated once;
//! - `plain-pass-alloc`: the same into a freshly allocated store, as `advance` returns one
//!   (adds allocation and first-touch page faults);
//! - `free`: `advance` with no potential (jobs/fermion-pair.toml);
//! - `kernel-events`: `advance` with the soft-Coulomb pair kernel
//!   (jobs/fermion-pair-coulomb.toml), thinning candidates and generation events.
//!
//! All run in a one-thread rayon pool. After criterion's own report, the cases run again in
//! interleaved rounds (the machine is shared and noisy); those medians and their ratios go
//! to `scaling-results/bench-advance.csv`. `SIGNFOLD_BENCH_PARTICLES` sets the store size
//! (default 10⁶).

mod support;

use criterion::BenchmarkId;
use signfold::engine::comm::Solo;
use signfold::engine::start;
use signfold::physics::flight::{Advancer, advance};
use signfold::physics::particles::Store;
use signfold::physics::units;
use std::hint::black_box;
use std::time::{Duration, Instant};

/// x ← x + v·dt into `dst` (same layout, preallocated), copying k, id and sign.
/// Interleaved rounds behind the CSV summary.
const ROUNDS: usize = 25;

fn plain_pass(src: &Store, dst: &mut Store, dt: f64, mass: f64) {
    for ((xo, ko), (&xi, &ki)) in dst
        .x
        .iter_mut()
        .zip(dst.k.iter_mut())
        .zip(src.x.iter().zip(&src.k))
    {
        *xo = xi + units::velocity(ki, mass) * dt;
        *ko = ki;
    }
    dst.id.copy_from_slice(&src.id);
    dst.sign.copy_from_slice(&src.sign);
}

/// The same pass into a freshly allocated store (as `advance` returns one): adds the
/// allocation and first-touch page faults.
fn plain_pass_alloc(src: &Store, dt: f64, mass: f64) -> Store {
    Store {
        n: src.n,
        x: src
            .x
            .iter()
            .zip(&src.k)
            .map(|(&x, &k)| x + units::velocity(k, mass) * dt)
            .collect(),
        k: src.k.clone(),
        id: src.id.clone(),
        sign: src.sign.clone(),
    }
}

fn main() {
    let particles: u64 = std::env::var("SIGNFOLD_BENCH_PARTICLES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(1_000_000);
    let set = [format!("numerics.samples={particles}")];
    let free = support::setup("fermion-pair.toml", &set);
    let coulomb = support::setup("fermion-pair-coulomb.toml", &set);
    let (state, _) = start::initial_state(&free, &Solo).expect("initial particles");
    let store = state.store;
    let n_in = store.len();
    let pool = support::one_thread();

    // Outputs of one interval: particle counts and fingerprints (unchanged by any change to
    // the hot loop that keeps behaviour bit-identical).
    let (out_free, _) = pool.install(|| advance(&free, &store, 0));
    let (out_coul, tally) = pool.install(|| advance(&coulomb, &store, 0));
    println!(
        "store: {n_in} particles (N = 2, {} B each); Γ_max·dt = {:.4} with the pair kernel",
        Store::bytes_per_particle(2),
        coulomb.gamma_max * coulomb.dt
    );
    println!(
        "free: {} out, fingerprint {:016x}; kernel: {} out, {} candidates, {} events, fingerprint {:016x}",
        out_free.len(),
        support::fingerprint(&out_free),
        out_coul.len(),
        tally.candidates,
        tally.events,
        support::fingerprint(&out_coul)
    );
    let outs = [n_in, n_in, out_free.len(), out_coul.len()];
    drop((out_free, out_coul));

    // The cases; each returns the time of its measured part.
    let mut dst = store.clone();
    let mut plain = || {
        let t = Instant::now();
        plain_pass(black_box(&store), &mut dst, free.dt, free.mass);
        black_box(&dst);
        t.elapsed()
    };
    let mut plain_alloc = || {
        let t = Instant::now();
        let out = plain_pass_alloc(black_box(&store), free.dt, free.mass);
        let d = t.elapsed();
        drop(black_box(out));
        d
    };
    // The engine advances in place: copy the start store into a reused work store (not
    // timed), then time the advance of the work store.
    // Each case keeps its advance buffers from one call to the next, as a run does.
    let work = std::cell::RefCell::new(store.clone());
    let timed_advance = |setup, advancer: &mut Advancer| {
        let mut guard = work.borrow_mut();
        let w: &mut Store = &mut guard;
        w.clone_from(&store);
        let t = Instant::now();
        let events = pool.install(|| {
            advancer
                .advance_in_place(setup, black_box(&mut *w), 0)
                .events
        });
        let d = t.elapsed();
        black_box((&*w, events));
        drop(guard);
        d
    };
    let (mut free_buffers, mut kernel_buffers) = (Advancer::default(), Advancer::default());
    let mut adv_free = || timed_advance(&free, &mut free_buffers);
    let mut adv_kernel = || timed_advance(&coulomb, &mut kernel_buffers);
    let names = ["plain-pass", "plain-pass-alloc", "free", "kernel-events"];
    let mut cases: [&mut dyn FnMut() -> Duration; 4] =
        [&mut plain, &mut plain_alloc, &mut adv_free, &mut adv_kernel];

    let mut c = support::criterion();
    {
        let mut g = c.benchmark_group("advance");
        g.throughput(criterion::Throughput::Elements(n_in as u64));
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

    // The summary: interleaved rounds, so that the ratios compare like with like.
    let medians = support::interleaved(ROUNDS, &mut cases);
    let (plain, plain_alloc) = (medians[0], medians[1]);
    let mut rows = Vec::new();
    println!("interleaved medians of {ROUNDS} rounds, one thread:");
    for ((name, out), m) in names.iter().zip(outs).zip(&medians) {
        rows.push(format!(
            "{name},{n_in},{out},1,{m:.6},{:.4e},{:.3},{:.3}",
            n_in as f64 / m,
            m / plain,
            m / plain_alloc
        ));
        println!(
            "{name:>17}: {:8.2} ms, {:.3e} particles/s/core, {:5.2}× plain pass, {:5.2}× plain pass into a new store",
            m * 1e3,
            n_in as f64 / m,
            m / plain,
            m / plain_alloc
        );
    }
    support::write_csv(
        "bench-advance.csv",
        "case,particles_in,particles_out,threads,median_seconds,particles_in_per_second_per_core,ratio_to_plain_pass,ratio_to_plain_pass_alloc",
        &rows,
    );
    println!("machine: {}", support::machine());
}
