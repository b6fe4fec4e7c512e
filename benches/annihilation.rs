//! Annihilation of a store of 10⁷ N = 2 particles (cell counts, reduction, selection,
//! compaction) beside a `sort_unstable` of as many random 64-bit keys (the baseline), all
//! on one core (a one-thread global rayon pool; pin the process with `taskset -c 1`).
//!
//! Cases:
//! - `sort-u64`: the baseline;
//! - `annihilate`: what a run does — an [`Annihilator`] kept from call to call (the
//!   driver's), through MPI's `World` (one rank, MPI initialised as a singleton) when MPI
//!   starts, else through `Solo`;
//! - `annihilate-fresh`: the same with fresh buffers every call (`annihilate`, `Solo`);
//! - `annihilate-adaptive`: the run's default pass, adaptive resolution (the merge tree over
//!   the nested cells) and then annihilation at the leaves, buffers kept; with the job's
//!   budget no merging is needed, so its survivors equal the finest cells' (checked).
//!
//! The store is that of jobs/fermion-pair-coulomb.toml (relative cells, exchange-merged)
//! after a few intervals of advance without annihilation, so that the signed initial state
//! and the children of generation events share cells of both signs. After criterion's own
//! report, the cases run again in interleaved rounds (the machine is shared and noisy);
//! those medians and the ratios go to `scaling-results/bench-annihilation.csv`, with the
//! heap allocations of one call (a counting global allocator, this thread only).
//! `SIGNFOLD_BENCH_PARTICLES` sets the store size (default 10⁷).

mod support;

use criterion::BenchmarkId;
use rand::{Rng, SeedableRng};
use signfold::engine::annihilate::{Annihilator, CellMesh, Cells, annihilate};
use signfold::engine::budget::Annihilation;
use signfold::engine::comm::{Comm, Solo};
use signfold::engine::mpi::World;
use signfold::engine::start;
use signfold::physics::flight::advance;
use signfold::physics::rng::Stream;
use std::alloc::{GlobalAlloc, Layout, System};
use std::cell::Cell;
use std::hint::black_box;
use std::time::{Duration, Instant};

/// Intervals of advance (at least) before the store is cut to size.
const INTERVALS: u64 = 4;
/// Interleaved rounds behind the CSV summary.
const ROUNDS: usize = 7;

/// The system allocator, counting the allocations (and reallocations) of each thread.
struct Counting;

thread_local! {
    static ALLOCATIONS: Cell<u64> = const { Cell::new(0) };
}

fn bump() {
    let _ = ALLOCATIONS.try_with(|c| c.set(c.get() + 1));
}

fn allocations() -> u64 {
    ALLOCATIONS.with(|c| c.get())
}

unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        bump();
        unsafe { System.alloc(layout) }
    }
    unsafe fn alloc_zeroed(&self, layout: Layout) -> *mut u8 {
        bump();
        unsafe { System.alloc_zeroed(layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        bump();
        unsafe { System.realloc(ptr, layout, new_size) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        unsafe { System.dealloc(ptr, layout) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

fn main() {
    // One rayon thread for the whole process, as a run with `--threads 1` sets it: the
    // calls below run on this thread (MPI's communicator stays on the thread that made it).
    rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build_global()
        .expect("global one-thread pool");
    let target: usize = std::env::var("SIGNFOLD_BENCH_PARTICLES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(10_000_000);
    // The comm of a one-rank run; `Solo` when MPI does not start here.
    let universe = mpi::initialize();
    let world = universe.as_ref().map(|u| World::new(u.world()));
    let (comm, comm_name): (&dyn Comm, &str) = match &world {
        Some(w) => (w, "MPI World, 1 rank"),
        None => (&Solo, "Solo (MPI did not start)"),
    };
    let t0 = Instant::now();
    // The cells this bench was measured with since it was written (the demo job has since
    // left its cells to the engine's defaults, 0.5 nm in x): the same workload, so that
    // its fingerprints and ratios stay comparable.
    let set = [
        format!("numerics.samples={}", target / 2),
        "annihilation.coordinates=\"relative\"".to_string(),
        "annihilation.cell_x=1.0".to_string(),
        "annihilation.cell_k=0.0131".to_string(),
    ];
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

    // The run's path: one Annihilator for all calls; warm it up and check it agrees.
    let mut kept = Annihilator::default();
    let mut s = store.clone();
    kept.run(&setup, Cells::Level(&mesh, 0), &mut s, step, comm);
    assert_eq!(support::fingerprint(&s), print, "kept buffers, {comm_name}");
    let mut s = store.clone();
    let a = allocations();
    kept.run(&setup, Cells::Level(&mesh, 0), &mut s, step, comm);
    let warm_allocs = allocations() - a;
    let mut s = store.clone();
    let a = allocations();
    annihilate(&setup, &mesh, &mut s, step, &Solo);
    let fresh_allocs = allocations() - a;
    let mut adaptive = Annihilation::new(&setup).expect("cell hierarchy");
    let mut s = store.clone();
    adaptive.run(&setup, &mut s, step, comm);
    assert_eq!(
        support::fingerprint(&s),
        print,
        "adaptive, no merging needed"
    );
    let mut s = store.clone();
    let a = allocations();
    adaptive.run(&setup, &mut s, step, comm);
    let adaptive_allocs = allocations() - a;
    println!(
        "heap allocations in one call: kept buffers ({comm_name}) {warm_allocs}, fresh buffers {fresh_allocs}, \
         adaptive {adaptive_allocs}"
    );

    // The cases; each returns the time of its measured part (the copy of the input is not).
    let mut sort = || {
        let mut v = keys.clone();
        let t = Instant::now();
        v.sort_unstable();
        let d = t.elapsed();
        black_box(&v);
        d
    };
    let mut run = || {
        let mut s = store.clone();
        let t = Instant::now();
        let r = kept.run(&setup, Cells::Level(&mesh, 0), &mut s, step, comm);
        let d = t.elapsed();
        black_box((r, &s));
        d
    };
    let mut fresh = || {
        let mut s = store.clone();
        let t = Instant::now();
        let r = annihilate(&setup, &mesh, &mut s, step, &Solo);
        let d = t.elapsed();
        black_box((r, &s));
        d
    };
    let mut adapt = || {
        let mut s = store.clone();
        let t = Instant::now();
        let r = adaptive.run(&setup, &mut s, step, comm);
        let d = t.elapsed();
        black_box((r.report, &s));
        d
    };
    let names = [
        "sort-u64",
        "annihilate",
        "annihilate-fresh",
        "annihilate-adaptive",
    ];
    let mut cases: [&mut dyn FnMut() -> Duration; 4] =
        [&mut sort, &mut run, &mut fresh, &mut adapt];

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

    // The summary: interleaved rounds, so that the ratios compare like with like.
    let m = support::interleaved(ROUNDS, &mut cases);
    let (sort, run, fresh, adapt) = (m[0], m[1], m[2], m[3]);
    let rows = [
        format!("sort-u64,{n},{n},,1,{sort:.6},1.000,"),
        format!(
            "annihilate,{n},{},{},1,{run:.6},{:.3},{warm_allocs}",
            rep.after,
            rep.local_cells,
            run / sort
        ),
        format!(
            "annihilate-fresh,{n},{},{},1,{fresh:.6},{:.3},{fresh_allocs}",
            rep.after,
            rep.local_cells,
            fresh / sort
        ),
        format!(
            "annihilate-adaptive,{n},{},{},1,{adapt:.6},{:.3},{adaptive_allocs}",
            rep.after,
            rep.local_cells,
            adapt / sort
        ),
    ];
    println!(
        "interleaved medians of {ROUNDS} rounds, one thread: sort_unstable {:.1} ms, annihilate \
         ({comm_name}, kept buffers) {:.1} ms: ratio {:.2}; fresh buffers {:.1} ms: ratio {:.2}; \
         adaptive {:.1} ms: ratio {:.2}",
        sort * 1e3,
        run * 1e3,
        run / sort,
        fresh * 1e3,
        fresh / sort,
        adapt * 1e3,
        adapt / sort
    );
    support::write_csv(
        "bench-annihilation.csv",
        "case,particles_in,particles_out,occupied_cells,threads,median_seconds,ratio_to_sort,allocations_per_call",
        &rows,
    );
    println!("machine: {}", support::machine());
}
