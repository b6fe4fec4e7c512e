//! Per-rank run figures (wall time per phase, bytes sent, occupied cells) gathered to rank
//! 0: the `/run` group of the result file and the phase table printed at the end.

use crate::engine::comm::Comm;
use crate::engine::timers::{Phase, Timers};
use crate::io::names::Dataset;
use crate::io::results::ResultFile;
use std::time::Instant;

/// Per-rank figures gathered to rank 0 into `/run`: wall seconds per phase, total wall
/// seconds, and per annihilation the series of `passes` (each of the same length: bytes and
/// messages sent, occupied cells; annihilation-major, ranks inner).
pub fn record_run(
    out: &mut ResultFile,
    timers: &Timers,
    started: Instant,
    passes: &[(Dataset, &[f64])],
    comm: &dyn Comm,
) {
    let mut mine: Vec<u64> = timers.secs.iter().map(|v| v.to_bits()).collect();
    mine.push(started.elapsed().as_secs_f64().to_bits());
    for (_, series) in passes {
        mine.extend(series.iter().map(|v| v.to_bits()));
    }
    let all = comm.gather_all(&mine);
    if !comm.is_root() {
        return;
    }
    let f = |r: usize, i: usize| f64::from_bits(all[r][i]);
    let ranks = all.len();
    for phase in Phase::ALL {
        let (i, name) = (phase as usize, phase.name());
        out.run.insert(
            format!("seconds_{name}"),
            ("s".into(), (0..ranks).map(|r| f(r, i)).collect()),
        );
    }
    let np = Phase::ALL.len();
    out.run.insert(
        "wall_seconds".into(),
        ("s".into(), (0..ranks).map(|r| f(r, np)).collect()),
    );
    let mut at = np + 1;
    for (d, series) in passes {
        let na = series.len();
        out.run.insert(
            d.name.into(),
            (
                d.units.into(),
                (0..na)
                    .flat_map(|a| (0..ranks).map(move |r| (a, r)))
                    .map(|(a, r)| f(r, at + a))
                    .collect(),
            ),
        );
        at += na;
    }
    out.run
        .insert("ranks".into(), ("1".into(), vec![ranks as f64]));
    out.run.insert(
        "threads".into(),
        ("1".into(), vec![rayon::current_num_threads() as f64]),
    );
}

/// One row of the phase table: seconds summed and maximal over ranks, and max/mean.
#[derive(Clone, Debug, PartialEq)]
pub struct PhaseRow {
    pub name: &'static str,
    pub sum: f64,
    pub max: f64,
    pub imbalance: f64,
}

/// The phase table (every phase, then "wall"), gathered from all ranks; `Some` on rank 0.
pub fn phase_table(timers: &Timers, started: Instant, comm: &dyn Comm) -> Option<Vec<PhaseRow>> {
    let mut mine: Vec<u64> = timers.secs.iter().map(|v| v.to_bits()).collect();
    mine.push(started.elapsed().as_secs_f64().to_bits());
    let all = comm.gather_all(&mine);
    if !comm.is_root() {
        return None;
    }
    let p = all.len() as f64;
    let names = Phase::ALL
        .iter()
        .map(|ph| ph.name())
        .chain(std::iter::once("wall"));
    Some(
        names
            .enumerate()
            .map(|(i, name)| {
                let v: Vec<f64> = all.iter().map(|r| f64::from_bits(r[i])).collect();
                let (sum, max) = (v.iter().sum::<f64>(), v.iter().cloned().fold(0.0, f64::max));
                let imbalance = if sum > 0.0 { max / (sum / p) } else { 1.0 };
                PhaseRow {
                    name,
                    sum,
                    max,
                    imbalance,
                }
            })
            .collect(),
    )
}
