//! Helpers shared by the benches: job loading, per-sample timing records, the machine
//! description and the CSV summaries under `scaling-results/`.
#![allow(dead_code)]

use signfold::config::job;
use signfold::physics::numerics::Setup;
use signfold::physics::particles::Store;
use std::path::PathBuf;
use std::time::Duration;

/// Criterion settings kept short: the machine is shared.
pub fn criterion() -> criterion::Criterion {
    criterion::Criterion::default()
        .sample_size(10)
        .warm_up_time(Duration::from_secs(1))
        .measurement_time(Duration::from_secs(5))
        .without_plots()
        .configure_from_args()
}

pub fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// Setup of a demo job in `jobs/`, with `--set`-style overrides.
pub fn setup(file: &str, overrides: &[String]) -> Setup {
    let path = root().join("jobs").join(file);
    let text = std::fs::read_to_string(&path).expect("demo job readable");
    let loaded = job::from_text(&text, file, root().join("jobs"), overrides).expect("valid job");
    Setup::new(&loaded).expect("setup builds")
}

/// A single-thread rayon pool: per-core figures.
pub fn one_thread() -> rayon::ThreadPool {
    rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .expect("thread pool")
}

/// Medians (seconds) of `rounds` interleaved runs of every case: round r runs all cases
/// once, starting at case r mod len, so that slow phases of a shared machine hit every
/// case alike and the ratios of medians stay meaningful. Each case returns the time of its
/// measured part.
pub fn interleaved(rounds: usize, cases: &mut [&mut dyn FnMut() -> Duration]) -> Vec<f64> {
    let m = cases.len();
    let mut times = vec![Vec::with_capacity(rounds); m];
    for r in 0..rounds {
        for j in 0..m {
            let c = (r + j) % m;
            times[c].push((cases[c])().as_secs_f64());
        }
    }
    times.into_iter().map(median).collect()
}

pub fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    let m = v.len();
    if m % 2 == 1 {
        v[m / 2]
    } else {
        0.5 * (v[m / 2 - 1] + v[m / 2])
    }
}

/// True when the bench binary runs as a test (`cargo test --benches`): run each case once.
pub fn test_mode() -> bool {
    std::env::args().any(|a| a == "--test")
}

/// CPU model, core count and memory from /proc.
pub fn machine() -> String {
    let cpu = std::fs::read_to_string("/proc/cpuinfo").unwrap_or_default();
    let model = cpu
        .lines()
        .find(|l| l.starts_with("model name"))
        .and_then(|l| l.split_once(':'))
        .map_or("unknown CPU".to_string(), |(_, v)| v.trim().to_string());
    let cores = std::thread::available_parallelism().map_or(0, |n| n.get());
    let gib = signfold::physics::numerics::machine_memory() / (1u64 << 30) as f64;
    format!("{model}, {cores} cores, {gib:.0} GiB")
}

/// Write `scaling-results/NAME` (header line, then rows) and say where.
pub fn write_csv(name: &str, header: &str, rows: &[String]) {
    let dir = root().join("scaling-results");
    std::fs::create_dir_all(&dir).expect("scaling-results/ writable");
    let path = dir.join(name);
    let mut text = format!("{header}\n");
    for r in rows {
        text += r;
        text.push('\n');
    }
    std::fs::write(&path, text).expect("summary written");
    println!("summary: {}", path.display());
}

/// FNV-1a over every bit of a store: equal before and after a change to the hot loops
/// means the engine's output did not change.
pub fn fingerprint(s: &Store) -> u64 {
    let mut h = 0xcbf2_9ce4_8422_2325u64;
    let mut eat = |w: u64| {
        h ^= w;
        h = h.wrapping_mul(0x0100_0000_01b3);
    };
    for v in s.x.iter().chain(&s.k) {
        eat(v.to_bits());
    }
    for &i in &s.id {
        eat(i);
    }
    for &g in &s.sign {
        eat(g as u64);
    }
    h
}
