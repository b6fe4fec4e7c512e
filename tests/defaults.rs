//! Numerics derived from the physics when a job leaves them unset (docs/method.md §2.6).

use signfold::physics::defaults;
use signfold::physics::numerics::Setup;
use std::path::Path;

fn validation_job(name: &str) -> std::path::PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("jobs/validation")
        .join(name)
}

#[test]
fn a_job_without_numerics_gets_them_with_reasons() {
    let loaded = defaults::load(&validation_job("v14-double-well.toml"), &[]).unwrap();
    let j = &loaded.job;
    // Orbitals 40 nm apart, 6 nm wide: L_c = max(2 (40 + 18), 48, 30) = 116 nm (rule of §2.6).
    assert_eq!(j.numerics.coherence_length, 116.0);
    assert!(j.domain.k_max > 0.0 && j.numerics.sync_step > 0.0);
    // The derived k_max keeps the kernel tail under the level `check` warns at.
    let setup = Setup::new(&loaded).unwrap();
    for t in [&setup.table1, &setup.table2].into_iter().flatten() {
        assert!(t.tail <= defaults::KERNEL_TAIL, "tail {}", t.tail);
    }
    // Every derived value is recorded in the job text that result files store.
    for key in [
        "numerics.coherence_length =",
        "domain.k_max =",
        "numerics.sync_step =",
    ] {
        assert!(
            loaded.text.contains(key),
            "{key} missing from\n{}",
            loaded.text
        );
    }
    // Resolving the stored text again (resume) gives the same values and the same text.
    let mut again =
        signfold::config::job::from_text(&loaded.text, "stored", loaded.base_dir.clone(), &[])
            .unwrap();
    defaults::resolve(&mut again).unwrap();
    assert_eq!(again.text, loaded.text);
    assert_eq!(again.job.domain.k_max, j.domain.k_max);
    assert_eq!(again.job.numerics.sync_step, j.numerics.sync_step);
}

#[test]
fn a_job_that_sets_its_numerics_keeps_them() {
    let loaded = defaults::load(&validation_job("v01-barrier.toml"), &[]).unwrap();
    assert_eq!(loaded.job.numerics.coherence_length, 60.0);
    assert_eq!(loaded.job.domain.k_max, 4.5);
    assert_eq!(loaded.job.numerics.sync_step, 1.0);
    assert!(!loaded.text.contains("derived by signfold"));
}
