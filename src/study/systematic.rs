//! The systematic check a user gets where no exact answer exists (docs/method.md §4):
//! the job run again with twice and four times the sample budget and with 1.5 times the
//! coherence length, each with a seed of its own, and every observable at every common
//! output time compared with the base run by the two-sided tests of
//! [`crate::analysis::stats`]. An answer that moves beyond the noise when the budget or
//! L_c grows was not converged in it.
//!
//! Why other seeds: with the same seed a variant repeats the base run exactly until its
//! larger budget first changes an annihilation, so early differences would be zero and a
//! two-sided test would read them as error bars far too large, while later ones would be
//! partly correlated. With independent seeds the difference of two runs has the variance
//! se_a² + se_b², and its Student-t has the Welch degrees of freedom.

use crate::analysis::stats;
use crate::config::job::LoadedJob;
use crate::io::names;
use crate::io::results::ResultFile;
use crate::study::accuracy::common_frames;
use crate::study::checks::{ACCEPT, Check, Kind};
use std::fmt::Write as _;

/// One rerun of the job: what it changes (as `--set` overrides, seed included).
#[derive(Clone, Debug, PartialEq)]
pub struct Variant {
    /// What a reader sees ("2× budget").
    pub label: &'static str,
    /// A name for its directory ("budget-2x").
    pub tag: &'static str,
    /// The job keys it sets, the seed included.
    pub set: Vec<String>,
}

/// The variants of a job whose resolved sample budget is `budget`: 2× and 4× the budget,
/// 1.5× the coherence length; variant i (from 1) runs with seed + i.
pub fn variants(loaded: &LoadedJob, budget: u64) -> Vec<Variant> {
    let seed = loaded.job.numerics.seed;
    let lc = loaded.job.numerics.coherence_length;
    [
        (
            "2× budget",
            "budget-2x",
            format!("annihilation.budget={}", 2 * budget),
        ),
        (
            "4× budget",
            "budget-4x",
            format!("annihilation.budget={}", 4 * budget),
        ),
        (
            "1.5× L_c",
            "coherence-1.5x",
            format!("numerics.coherence_length={}", 1.5 * lc),
        ),
    ]
    .into_iter()
    .zip(1u64..)
    .map(|((label, tag, set), i)| Variant {
        label,
        tag,
        set: vec![set, format!("numerics.seed={}", seed.wrapping_add(i))],
    })
    .collect()
}

/// Compare a variant with the base run (independent seeds) at every common output time:
/// norm, transmitted norm, energy (scalars) and density, pair density over x ≤ x′ (binned),
/// each difference studentised by √(se_a² + se_b²) with the Welch degrees of freedom.
pub fn compare_runs(
    job: &str,
    groups: usize,
    base: &ResultFile,
    variant: &ResultFile,
) -> Vec<Check> {
    let mut out = Vec::new();
    let nx = base.x.len();
    for (i, j, time) in common_frames(variant, base) {
        for d in [names::NORM, names::NORM_RIGHT, names::ENERGY] {
            let get =
                |f: &ResultFile, t: usize, name: &str| f.series.get(name).map(|s| s.frame(t)[0]);
            let err = names::error_of(d.name);
            let (Some(a), Some(ea), Some(b), Some(eb)) = (
                get(variant, i, d.name),
                get(variant, i, &err),
                get(base, j, d.name),
                get(base, j, &err),
            ) else {
                continue;
            };
            out.push(Check {
                job: job.into(),
                time,
                observable: d.name,
                kind: Kind::Scalar {
                    estimate: a,
                    se: (ea * ea + eb * eb).sqrt(),
                    exact: b,
                    test: stats::difference_test(a, ea, b, eb, groups, 0.0),
                },
            });
        }
        for (d, upper) in [(names::DENSITY, false), (names::PAIR_DENSITY, true)] {
            let err = names::error_of(d.name);
            let (Some(a), Some(ea), Some(b), Some(eb)) = (
                variant.series.get(d.name),
                variant.series.get(&err),
                base.series.get(d.name),
                base.series.get(&err),
            ) else {
                continue;
            };
            let test = stats::binned_difference_test(
                a.frame(i),
                ea.frame(i),
                b.frame(j),
                eb.frame(j),
                groups,
                |k| !upper || k / nx <= k % nx,
            );
            out.push(Check {
                job: job.into(),
                time,
                observable: d.name,
                kind: Kind::Binned(test),
            });
        }
    }
    out
}

/// What became of one variant.
#[derive(Clone, Debug)]
pub enum Outcome {
    Compared(Vec<Check>),
    /// Not run, and why (e.g. its memory forecast exceeded the cap).
    Skipped(String),
}

/// Checks of a compared variant that moved beyond the acceptance.
pub fn moved(outcome: &Outcome) -> usize {
    match outcome {
        Outcome::Compared(c) => c.iter().filter(|c| !c.passed()).count(),
        Outcome::Skipped(_) => 0,
    }
}

/// The report of a systematic check (markdown): one row per variant, then every check
/// that moved.
pub fn report(job: &str, results: &[(Variant, Outcome)]) -> String {
    let mut s = format!(
        "# Systematic check of {job}\n\nEach variant is the job rerun with one setting enlarged and a seed of its own, compared \
         with the base run at every common output time (scalars: |z| ≤ {ACCEPT}; binned data: the two-sided mean-p score \
         |Z| ≤ {ACCEPT}; differences studentised by the combined error with Welch degrees of freedom). A check that \
         moved means the base run was not converged in that setting.\n\n\
         | variant | settings | checks | moved | largest stat |\n|---|---|---|---|---|\n"
    );
    for (v, o) in results {
        let sets = v.set.join(", ");
        let _ = match o {
            Outcome::Compared(c) => {
                let worst = c
                    .iter()
                    .map(Check::statistic)
                    .fold(0.0f64, |w, x| if x.abs() > w.abs() { x } else { w });
                writeln!(
                    s,
                    "| {} | {sets} | {} | {} | {worst:+.2} |",
                    v.label,
                    c.len(),
                    moved(o)
                )
            }
            Outcome::Skipped(why) => writeln!(s, "| {} | {sets} | skipped: {why} | | |", v.label),
        };
    }
    let mut any = false;
    for (v, o) in results {
        if let Outcome::Compared(c) = o {
            for c in c.iter().filter(|c| !c.passed()) {
                if !any {
                    let _ = writeln!(s, "\nMoved beyond the noise:\n");
                    any = true;
                }
                let _ = writeln!(
                    s,
                    "- {}: {} at {} fs: {:+.2}",
                    v.label,
                    c.observable,
                    c.time,
                    c.statistic()
                );
            }
        }
    }
    if !any {
        let _ = writeln!(s, "\nNothing moved beyond the noise.");
    }
    s
}
