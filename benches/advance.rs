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
//! All three run in a one-thread rayon pool. Medians and ratios go to
//! `scaling-results/bench-advance.csv`. `SIGNFOLD_BENCH_PARTICLES` sets the store size
//! (default 10⁶).

mod support;

use criterion::BenchmarkId;
use signfold::advance::advance;
use signfold::comm::Solo;
use signfold::particles::Store;
use signfold::run;
use signfold::units;
use std::hint::black_box;
use std::time::{Duration, Instant};
use support::Record;

/// x ← x + v·dt into `dst` (same layout, preallocated), copying k, id and sign.
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
    let set = [format!("numerics.particles={particles}")];
    let free = support::setup("fermion-pair.toml", &set);
    let coulomb = support::setup("fermion-pair-coulomb.toml", &set);
    let (state, _) = run::initial_state(&free, &Solo).expect("initial particles");
    let store = state.store;
    let n_in = store.len();
    let mut dst = store.clone();
    let pool = support::one_thread();
    let record = Record::default();

    // Outputs of one interval: particle counts and a fingerprint of the free advance
    // (unchanged by any change to the hot loop that keeps behaviour bit-identical).
    let (out_free, tally_free) = pool.install(|| advance(&free, &store, 0));
    let (out_coul, tally_coul) = pool.install(|| advance(&coulomb, &store, 0));
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
        tally_coul.candidates,
        tally_coul.events,
        support::fingerprint(&out_coul)
    );
    let _ = tally_free;
    let outs = [
        ("plain-pass", n_in),
        ("plain-pass-alloc", n_in),
        ("free", out_free.len()),
        ("kernel-events", out_coul.len()),
    ];
    drop((out_free, out_coul));

    let mut c = support::criterion();
    {
        let mut g = c.benchmark_group("advance");
        g.throughput(criterion::Throughput::Elements(n_in as u64));
        g.bench_function(BenchmarkId::from_parameter("plain-pass"), |b| {
            b.iter_custom(|iters| {
                let t = Instant::now();
                for _ in 0..iters {
                    plain_pass(black_box(&store), &mut dst, free.dt, free.mass);
                    black_box(&dst);
                }
                let d = t.elapsed();
                record.push("plain-pass", d, iters);
                d
            })
        });
        g.bench_function(BenchmarkId::from_parameter("plain-pass-alloc"), |b| {
            b.iter_custom(|iters| {
                let mut d = Duration::ZERO;
                for _ in 0..iters {
                    let t = Instant::now();
                    let out = plain_pass_alloc(black_box(&store), free.dt, free.mass);
                    d += t.elapsed();
                    drop(black_box(out));
                }
                record.push("plain-pass-alloc", d, iters);
                d
            })
        });
        for (name, setup) in [("free", &free), ("kernel-events", &coulomb)] {
            g.bench_function(BenchmarkId::from_parameter(name), |b| {
                b.iter_custom(|iters| {
                    let mut d = Duration::ZERO;
                    for _ in 0..iters {
                        let t = Instant::now();
                        let out = pool.install(|| advance(setup, black_box(&store), 0));
                        d += t.elapsed();
                        drop(black_box(out));
                    }
                    record.push(name, d, iters);
                    d
                })
            });
        }
        g.finish();
    }
    c.final_summary();

    let medians: Vec<Option<f64>> = outs
        .iter()
        .map(|(name, _)| record.median(name, support::SAMPLES))
        .collect();
    let Some(plain) = medians[0] else {
        return; // not measured (test mode or filtered): no summary
    };
    let mut rows = Vec::new();
    for ((name, out), m) in outs.iter().zip(&medians) {
        let Some(m) = m else { continue };
        rows.push(format!(
            "{name},{n_in},{out},1,{m:.6},{:.4e},{:.3}",
            n_in as f64 / m,
            m / plain
        ));
        println!(
            "{name:>14}: median {:8.2} ms, {:.3e} particles/s/core, {:.2}× the plain pass",
            m * 1e3,
            n_in as f64 / m,
            m / plain
        );
    }
    support::write_csv(
        "bench-advance.csv",
        "case,particles_in,particles_out,threads,median_seconds,particles_in_per_second_per_core,ratio_to_plain_pass",
        &rows,
    );
    println!("machine: {}", support::machine());
}
