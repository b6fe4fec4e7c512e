//! Output bins and output times, shared by the Monte Carlo and the exact reference so that
//! both write the same grids.

use crate::config::job::Job;

/// Number of synchronisation steps between outputs: output.interval rounded to a whole
/// number (≥ 1) of sync steps; default end_time/20.
pub fn steps_per_output(job: &Job) -> u64 {
    let dt = job.numerics.sync_step;
    let interval = job.output.interval.unwrap_or(job.numerics.end_time / 20.0);
    ((interval / dt).round() as u64).max(1)
}

/// Total number of synchronisation steps: ceil(end_time / sync_step).
pub fn total_steps(job: &Job) -> u64 {
    ((job.numerics.end_time / job.numerics.sync_step) - 1e-9)
        .ceil()
        .max(1.0) as u64
}

/// Time (fs) of synchronisation step `s`: exactly s·sync_step.
pub fn step_time(job: &Job, s: u64) -> f64 {
    s as f64 * job.numerics.sync_step
}

/// Steps at which output is written: 0, every `steps_per_output`, and the last step.
pub fn output_steps(job: &Job) -> Vec<u64> {
    let (every, last) = (steps_per_output(job), total_steps(job));
    let mut v: Vec<u64> = (0..=last).step_by(every as usize).collect();
    if *v.last().expect("step 0 is always there") != last {
        v.push(last);
    }
    v
}

/// Output times, fs.
pub fn output_times(job: &Job) -> Vec<f64> {
    output_steps(job)
        .into_iter()
        .map(|s| step_time(job, s))
        .collect()
}

/// Uniform bins over [lo, hi): centres, and the index of a value (None outside).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Bins {
    pub lo: f64,
    pub hi: f64,
    pub n: usize,
}

impl Bins {
    pub fn width(&self) -> f64 {
        (self.hi - self.lo) / self.n as f64
    }
    pub fn centres(&self) -> Vec<f64> {
        (0..self.n)
            .map(|i| self.lo + (i as f64 + 0.5) * self.width())
            .collect()
    }
    #[inline]
    pub fn index(&self, v: f64) -> Option<usize> {
        let t = (v - self.lo) / (self.hi - self.lo);
        if (0.0..1.0).contains(&t) {
            Some(((t * self.n as f64) as usize).min(self.n - 1))
        } else {
            None
        }
    }
}

/// Output bins in x over the domain.
pub fn x_bins(job: &Job) -> Bins {
    Bins {
        lo: job.domain.x_min,
        hi: job.domain.x_max,
        n: job.output.x_bins,
    }
}

/// Output bins in k over [−k_max, k_max].
pub fn k_bins(job: &Job) -> Bins {
    Bins {
        lo: -job.domain.k_max,
        hi: job.domain.k_max,
        n: job.output.k_bins,
    }
}
