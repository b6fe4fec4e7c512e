//! `check`'s memory forecast against the peak resident size of a real run.
//!
//! Each run's own peak resident size comes from wait4's rusage of that child process.

mod common;

use common::{bin, ok, signfold, write_job};
use signfold::io::names;
use signfold::io::results::ResultFile;
use std::collections::BTreeMap;

/// One electron over a shallow well (jobs/validation/v03-well.toml at a fifth of the
/// particles and 60 % of the time): the count grows steadily and reaches its budget. Run
/// with both resolutions (the adaptive pass adds its merge tree and leaf buffers).
const JOB: &str = r#"
[particles]
count = 1
statistics = "distinguishable"
mass = 0.067

[[orbital]]
kind = "gaussian"
centre = -40.0
wavevector = 0.35
width = 8.0

[domain]
x_min = -140.0
x_max = 140.0
mesh_cells = 560
boundary = "absorbing"
k_max = 2.5

[[potential]]
kind = "gaussian"
centre = 0.0
width = 3.0
height = -0.1

[numerics]
coherence_length = 60.0
sync_step = 1.0
end_time = 60.0
samples = 40000
groups = 8
seed = 103

[annihilation]
cell_x = 0.5
resolution = "RESOLUTION"

[output]
interval = 10.0
x_bins = 140
k_bins = 100
"#;

/// `signfold run ARGS` with glibc's mmap threshold fixed at its default 128 KiB, and the
/// peak resident size (bytes) of that process alone (wait4's rusage of the child). The model
/// takes a growing vector's resident size to be its largest length (large blocks are
/// mapped pages, moved by the kernel when they grow); glibc's dynamic threshold instead
/// serves vectors below 32 MiB from the heap after the first large free, where a grown
/// vector's earlier copies can stay resident (up to its size again, not modelled; the
/// measurements in scaling-results/MEMORY.md include it).
// The child is reaped by wait4 (which also gives its rusage), not by `Child::wait`.
#[allow(clippy::zombie_processes)]
fn run_mapped(args: &[&str]) -> f64 {
    let child = std::process::Command::new(bin())
        .arg("run")
        .args(args)
        .env("MALLOC_MMAP_THRESHOLD_", "131072")
        .stdout(std::process::Stdio::null())
        .stderr(std::process::Stdio::null())
        .spawn()
        .expect("the signfold binary runs");
    let mut status = 0;
    let mut u: libc::rusage = unsafe { std::mem::zeroed() };
    // SAFETY: wait4 on our own child's pid writes into the status and struct we own.
    let pid = unsafe { libc::wait4(child.id() as libc::pid_t, &mut status, 0, &mut u) };
    assert_eq!(pid, child.id() as libc::pid_t, "wait4");
    assert!(
        libc::WIFEXITED(status) && libc::WEXITSTATUS(status) == 0,
        "signfold run {args:?} failed (status {status})"
    );
    u.ru_maxrss as f64 * 1024.0 // kilobytes on Linux
}

/// What `check` printed: the memory terms (MiB) and the numbers the tolerance needs.
struct Printed {
    terms: BTreeMap<String, f64>,
    gamma_max: f64,
    dt: f64,
    growth_max: f64,
    survival: f64,
    cells: f64,
    budget: f64,
    peak: f64,
}

fn number_after(text: &str, key: &str) -> f64 {
    let i = text
        .find(key)
        .unwrap_or_else(|| panic!("`{key}` in:\n{text}"));
    let rest = &text[i + key.len()..];
    let end = rest
        .find(|c: char| !(c.is_ascii_digit() || "+-.e".contains(c)))
        .unwrap_or(rest.len());
    rest[..end]
        .parse()
        .unwrap_or_else(|_| panic!("a number after `{key}` in:\n{text}"))
}

fn parse(text: &str) -> Printed {
    let mut terms = BTreeMap::new();
    let mut in_terms = false;
    for line in text.lines() {
        if line.starts_with("memory per rank at the peak") {
            in_terms = true;
            continue;
        }
        if in_terms {
            let Some(rest) = line.strip_prefix("  ") else {
                break;
            };
            let head = &rest[..rest.find(" MiB").expect("MiB")];
            let (name, mib) = head.trim_end().rsplit_once(' ').expect("name and size");
            terms.insert(name.trim().to_string(), mib.trim().parse::<f64>().unwrap());
        }
    }
    let anni = text
        .lines()
        .find(|l| l.starts_with("  annihilation "))
        .expect("annihilation term");
    let cells_at = anni.find(" cells ×").expect("cells");
    let cells = anni[..cells_at]
        .rsplit(' ')
        .next()
        .unwrap()
        .parse()
        .unwrap();
    Printed {
        terms,
        gamma_max: number_after(text, "bound Γ_max = "),
        dt: {
            let steps = &text[text.find("\nsteps: ").expect("steps line")..];
            number_after(steps, " of ")
        },
        growth_max: number_after(text, "(largest ×"),
        survival: number_after(text, "(extrapolated: ") / 100.0,
        cells,
        budget: number_after(text, "annihilation.budget = "),
        peak: number_after(text, "forecast: peak "),
    }
}

/// The forecast's particle-dependent part (store, advance, annihilation buffers) brackets
/// the growth of the peak resident size from a run with almost no particles to the real
/// one. Taking the difference of two runs of the same job removes what the model measures
/// or does not model (code, libraries, MPI, HDF5's buffers, histograms, result frames);
/// the bracket comes from the stated approximations of `engine::memory`:
/// - the peak count: forecast budget × g (g the pilot's largest growth per step); a run
///   that reaches its budget peaks between the budget and budget × exp(2Γ_max·Δt), the
///   bound on one step's expected growth;
/// - occupied cells: the forecast over-estimates them (power law fitted at the pilot's
///   count); their number lies between none and the forecast scaled with the count;
/// - annihilation candidates: between (1 − s)/2 and (1 + s)/2 of the particles.
#[test]
fn forecast_brackets_the_peak_resident_memory_of_a_run() {
    for resolution in ["fixed", "adaptive"] {
        brackets(resolution);
    }
}

fn brackets(resolution: &str) {
    let dir = tempfile::tempdir().unwrap();
    let job = write_job(
        dir.path(),
        "well.toml",
        &JOB.replace("RESOLUTION", resolution),
    );
    let job_s = job.to_str().unwrap();
    let small = ["--set", "numerics.samples=200"];
    // A run with almost no samples, then the job itself.
    let out_small = dir.path().join("small");
    let mut args = vec![job_s, "--out", out_small.to_str().unwrap()];
    args.extend_from_slice(&small);
    let rss_small = run_mapped(&args);
    let out_big = dir.path().join("big");
    let rss_big = run_mapped(&[job_s, "--out", out_big.to_str().unwrap()]);
    // `check` after both runs (it needs far less memory than the big run).
    let big = parse(&ok(&signfold(&["check", job_s])));
    let mut args = vec!["check", job_s];
    args.extend_from_slice(&small);
    let small_f = parse(&ok(&signfold(&args)));

    // The premise: the run passed its budget, so its peak lies in [budget, budget·ĝ].
    let res = ResultFile::read(&out_big.join(names::OBSERVABLES_FILE)).unwrap();
    let before = &res
        .records
        .get(names::ANNIHILATION_BEFORE.name)
        .expect("annihilations recorded")
        .1;
    let peak = before.iter().cloned().fold(0.0, f64::max);
    assert!(
        peak > big.budget,
        "the test job must reach its budget ({} > {})",
        peak,
        big.budget
    );
    let g_hat = (2.0 * big.gamma_max * big.dt).exp();
    assert!(
        peak <= big.budget * g_hat * 1.01,
        "peak {peak} beyond one step at the bound rate past the budget"
    );

    const MIB: f64 = (1u64 << 20) as f64;
    let part = |p: &Printed| {
        ["sample store", "advance", "resolution", "annihilation"]
            .iter()
            .map(|n| p.terms.get(*n).copied().unwrap_or(0.0) * MIB)
            .sum::<f64>()
    };
    let measured = rss_big - rss_small;
    let forecast = part(&big) - part(&small_f);
    // Scale from the forecast peak (budget × g) to the true one.
    let (lo_scale, hi_scale) = (1.0 / big.growth_max, g_hat / big.growth_max);
    let store = big.terms["sample store"] * MIB;
    // Annihilation buffers without cells and with the fewest candidates: per particle its
    // cell index and keep flag (9 B); the keys of several threads left out.
    let peak_f = big.peak;
    let fewest_candidates = (1.0 - big.survival) / 2.0 * peak_f * 16.0;
    let lo = (store + 9.0 * peak_f + fewest_candidates) * lo_scale - part(&small_f);
    // Hash slots are a power of two: up to twice their scaled share again.
    let slots = signfold::engine::memory::hash_slots(big.cells * hi_scale) * 24.0;
    let hi = part(&big) * hi_scale + slots;
    println!(
        "{resolution}: forecast particle part {:.1} MiB, measured {:.1} MiB (big {:.1}, small {:.1}), bracket [{:.1}, {:.1}] MiB",
        forecast / MIB,
        measured / MIB,
        rss_big / MIB,
        rss_small / MIB,
        lo / MIB,
        hi / MIB
    );
    assert!(
        measured >= lo && measured <= hi,
        "{resolution}: peak resident growth {:.1} MiB outside the model's bracket [{:.1}, {:.1}] MiB (forecast {:.1} MiB)",
        measured / MIB,
        lo / MIB,
        hi / MIB,
        forecast / MIB
    );
}
