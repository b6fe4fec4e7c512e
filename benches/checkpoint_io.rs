//! Checkpoint write and read bandwidth for 10⁷ particles (N = 2) on 1 and 2 ranks, beside
//! a plain sequential write and read of the same number of bytes to the same disk in the
//! same run. Run with `cargo bench --bench checkpoint_io`: the one-rank part runs in this
//! process, then it starts itself under `mpirun -np 2` for the two-rank part. Both rows go
//! to `scaling-results/bench-checkpoint.csv`.
//!
//! Neither side calls fsync: both measure what the operating system accepts into its page
//! cache and hands back, which is what a run sees unless the disk is slower than its cache.

#[path = "support/mod.rs"]
mod support;

use signfold::config::job;
use signfold::engine::comm::Comm;
use signfold::engine::mpi::World;
use signfold::engine::state::State;
use signfold::io::checkpoint;
use signfold::io::results::ResultFile;
use signfold::physics::estimators::Departed;
use signfold::physics::particles::Store;
use std::io::{Read, Write};
use std::time::Instant;

const ROUNDS: usize = 3;

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(|a, b| a.partial_cmp(b).unwrap());
    v[v.len() / 2]
}

fn main() {
    // The environment before MPI starts, for the mpirun of the two-rank part (a singleton's
    // MPI variables would confuse it).
    let starting_env: Vec<(std::ffi::OsString, std::ffi::OsString)> = std::env::vars_os().collect();
    let universe = mpi::initialize().expect("MPI");
    let world = World::new(universe.world());
    let total: u64 = std::env::var("SIGNFOLD_BENCH_PARTICLES")
        .ok()
        .and_then(|v| v.parse().ok())
        .unwrap_or(10_000_000);
    let dir = std::env::var("SIGNFOLD_BENCH_DIR")
        .map(std::path::PathBuf::from)
        .unwrap_or_else(|_| support::root().join("target").join("bench-checkpoint"));
    if world.is_root() {
        let _ = std::fs::remove_dir_all(&dir);
        std::fs::create_dir_all(&dir).expect("bench directory");
    }
    world.any(false); // everyone waits for the directory
    // A synthetic store of this rank's share (N = 2).
    let (r, p) = (world.rank() as u64, world.size() as u64);
    let mine = (total * (r + 1) / p - total * r / p) as usize;
    let mut store = Store::with_capacity(2, mine);
    for i in 0..mine {
        let v = (i as f64).sin();
        store.push(
            &[v, -v],
            &[0.5 * v, 0.25],
            (r << 40) | i as u64,
            if i % 3 == 0 { -1 } else { 1 },
        );
    }
    let text = std::fs::read_to_string(support::root().join("jobs/fermion-pair.toml")).unwrap();
    let loaded = job::from_text(
        &text,
        "fermion-pair.toml",
        support::root().join("jobs"),
        &[],
    )
    .unwrap();
    let state = State {
        step: 1,
        store,
        s0: vec![1; 8],
        gone: Departed {
            left: vec![0; 8],
            right: vec![0; 8],
        },
        initial_count: total,
        annihilations: 0,
        count_after_annihilation: 0,
    };
    let mut results = ResultFile::new(
        signfold::io::results::OBSERVABLES_TYPE,
        &text,
        vec![0.0],
        vec![0.0],
    );
    results.push("time", "fs", &[], &[0.0]);
    let bytes = total as f64 * Store::bytes_per_particle(2) as f64;
    let (mut w, mut rd, mut pw, mut pr) = (vec![], vec![], vec![], vec![]);
    for round in 0..ROUNDS {
        let mut st = State {
            step: 1 + round as u64,
            store: state.store.clone(),
            ..clone_state(&state)
        };
        world.any(false);
        let t = Instant::now();
        if let Err(e) = checkpoint::write(
            &dir,
            &st,
            &results,
            &loaded,
            1.0,
            "benchmark",
            ROUNDS + 1,
            &world,
        ) {
            panic!("checkpoint: {e:#}");
        }
        world.any(false);
        w.push(t.elapsed().as_secs_f64());
        let t = Instant::now();
        let back = checkpoint::newest_valid(&dir, &world).expect("checkpoint read");
        world.any(false);
        rd.push(t.elapsed().as_secs_f64());
        st.store = back.state.store;
        // The plain baseline, on rank 0, same number of bytes, same disk.
        if world.is_root() {
            let path = dir.join("plain.bin");
            let buf = vec![0x5au8; bytes as usize];
            let t = Instant::now();
            let mut f = std::fs::File::create(&path).unwrap();
            f.write_all(&buf).unwrap();
            drop(f);
            pw.push(t.elapsed().as_secs_f64());
            let mut back = Vec::with_capacity(buf.len());
            let t = Instant::now();
            std::fs::File::open(&path)
                .unwrap()
                .read_to_end(&mut back)
                .unwrap();
            pr.push(t.elapsed().as_secs_f64());
            std::fs::remove_file(&path).unwrap();
        }
    }
    if !world.is_root() {
        return;
    }
    let (w, rd, pw, pr) = (median(w), median(rd), median(pw), median(pr));
    let mb = bytes / 1e6;
    let row = format!(
        "{},{total},{:.0},{:.1},{:.1},{:.1},{:.1},{:.3},{:.3}",
        world.size(),
        bytes,
        mb / w,
        mb / rd,
        mb / pw,
        mb / pr,
        (mb / w) / (mb / pw),
        (mb / rd) / (mb / pr)
    );
    println!(
        "{} rank(s): checkpoint write {:.0} MB/s, read {:.0} MB/s; plain write {:.0} MB/s, read {:.0} MB/s; ratios {:.2} (write), {:.2} (read)",
        world.size(),
        mb / w,
        mb / rd,
        mb / pw,
        mb / pr,
        pw / w,
        pr / rd
    );
    let csv = support::root()
        .join("scaling-results")
        .join("bench-checkpoint.csv");
    let header = "ranks,particles,bytes,checkpoint_write_MBps,checkpoint_read_MBps,plain_write_MBps,plain_read_MBps,write_ratio,read_ratio";
    let mut text = if world.size() == 1 {
        format!("{header}\n")
    } else {
        std::fs::read_to_string(&csv).unwrap_or_else(|_| format!("{header}\n"))
    };
    text += &row;
    text.push('\n');
    std::fs::write(&csv, text).unwrap();
    if world.size() == 1 && std::env::var("SIGNFOLD_BENCH_CHILD").is_err() {
        println!("machine: {}", support::machine());
        // The two-rank part: this executable under mpirun.
        let exe = std::env::current_exe().unwrap();
        let status = std::process::Command::new("mpirun")
            .env_clear()
            .envs(starting_env)
            .args(["-np", "2", "--oversubscribe"])
            .arg(&exe)
            .env("SIGNFOLD_BENCH_CHILD", "1")
            .env("OMPI_ALLOW_RUN_AS_ROOT", "1")
            .env("OMPI_ALLOW_RUN_AS_ROOT_CONFIRM", "1")
            .status();
        match status {
            Ok(s) if s.success() => println!("summary: {}", csv.display()),
            other => eprintln!("the two-rank part did not run: {other:?}"),
        }
    }
}

fn clone_state(s: &State) -> State {
    State {
        step: s.step,
        store: Store::new(s.store.n),
        s0: s.s0.clone(),
        gone: s.gone.clone(),
        initial_count: s.initial_count,
        annihilations: s.annihilations,
        count_after_annihilation: s.count_after_annihilation,
    }
}
