//! Heap allocations in the step loop after warm-up (issue: "no allocation in the step loop
//! after warm-up, counted in a test or bench"). A counting global allocator (all threads:
//! this binary holds this one test only) counts every allocation and reallocation while a
//! run's own synchronisation step (`engine::step::sync_step`: advance, trigger, placement,
//! budgeted annihilation) is repeated on one rank, one thread, with annihilation every step.
//! Buffers are kept from one step to the next and only grow, so once the count has settled
//! a step that stays below the largest count seen before must not allocate.

use signfold::engine::comm::Solo;
use signfold::engine::start::initial_state;
use signfold::engine::step::{StepBuffers, sync_step};
use signfold::engine::timers::Timers;
use signfold::physics::numerics::Setup;
use std::alloc::{GlobalAlloc, Layout, System};
use std::sync::atomic::{AtomicU64, Ordering};

struct Counting;

static ALLOCATIONS: AtomicU64 = AtomicU64::new(0);

unsafe impl GlobalAlloc for Counting {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        ALLOCATIONS.fetch_add(1, Ordering::Relaxed);
        unsafe { System.alloc(layout) }
    }
    unsafe fn alloc_zeroed(&self, layout: Layout) -> *mut u8 {
        ALLOCATIONS.fetch_add(1, Ordering::Relaxed);
        unsafe { System.alloc_zeroed(layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        ALLOCATIONS.fetch_add(1, Ordering::Relaxed);
        unsafe { System.realloc(ptr, layout, new_size) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        unsafe { System.dealloc(ptr, layout) }
    }
}

#[global_allocator]
static GLOBAL: Counting = Counting;

/// Steps before the buffers count as warm: the per-task buffers of the advance take the
/// largest fluctuation seen so far, which settles within a few tens of steps.
const WARM_UP: u64 = 60;

/// The demos with a one-body kernel (barrier) and a pair kernel (interacting pair), both
/// resolutions: after the warm-up, steps whose count stays below the largest count seen so
/// far make no allocation.
#[test]
fn settled_steps_do_not_allocate() {
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .unwrap();
    let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("jobs");
    for (name, resolution) in [
        ("barrier-packet.toml", "adaptive"),
        ("fermion-pair-coulomb.toml", "adaptive"),
        ("fermion-pair-coulomb.toml", "fixed"),
    ] {
        let text = std::fs::read_to_string(dir.join(name)).unwrap();
        let set = vec![
            "numerics.samples=20000".to_string(),
            "annihilation.trigger=1.01".to_string(),
            format!("annihilation.resolution=\"{resolution}\""),
        ];
        let mut loaded =
            signfold::config::job::from_text(&text, name, dir.clone(), &set).expect("valid");
        signfold::physics::defaults::resolve(&mut loaded).expect("numerics derive");
        let setup = Setup::new(&loaded).expect("a setup");
        pool.install(|| {
            let (mut st, _) = initial_state(&setup, &Solo).unwrap();
            let mut buffers = StepBuffers::new(&setup).unwrap();
            let mut timers = Timers::default();
            let mut largest = 0u64;
            let (mut settled, mut allocating) = (0, Vec::new());
            for step in 0..setup.steps.min(2 * WARM_UP) {
                let before = ALLOCATIONS.load(Ordering::Relaxed);
                let out = sync_step(&setup, &mut buffers, &mut st, &Solo, &mut timers);
                let made = ALLOCATIONS.load(Ordering::Relaxed) - before;
                let peak = out.advanced.max(out.count);
                if step >= WARM_UP && peak < largest {
                    settled += 1;
                    if made > 0 {
                        allocating.push((step, made, peak, largest));
                    }
                }
                largest = largest.max(peak);
            }
            assert!(
                settled >= 10,
                "{name} {resolution}: {settled} settled steps"
            );
            assert!(
                allocating.is_empty(),
                "{name} {resolution}: settled steps that allocated (step, allocations, \
                 count, largest before): {allocating:?}"
            );
        });
    }
}
