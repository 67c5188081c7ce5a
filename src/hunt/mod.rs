//! Stage 7: campaigns. Generate traces, run them on targets, keep every distinct failure, shrink
//! it and store it where it can be replayed.
//!
//! A campaign is deterministic for a seed and a run budget whatever the parallelism: traces are
//! generated one after the other by the [`TraceSource`], run on `jobs` targets in parallel, and
//! the verdicts are processed in trace order, so findings, their first run numbers and the
//! shrunk traces are the same with one job or eight (for targets whose verdict depends only on
//! the trace). Failures are deduplicated by signature; a new signature is confirmed by rerunning
//! the trace (a failure that does not repeat is reported as flaky and not shrunk, so shrinking
//! never chases noise), shrunk with [`crate::shrink`], and stored by [`store::Store`].
//!
//! Against a target that replies message by message ([`Target::replies`]), a source may
//! make its runs *live* ([`RunInput::Live`]): the generated walk is played as a
//! [`crate::generate::live::LiveSession`] through [`Target::converse`], so the values its slots
//! copy are the ids the target actually issued earlier in the session. What was sent is stored
//! (the replies heard marked `reply`), and confirming, shrinking and replay send those bytes
//! again as fixed messages: values are not re-derived, so a finding reproduces on a target that
//! issues the same values for the same session, and a shrink candidate that would change the
//! values issued later fails to reproduce and is not taken.
//!
//! A stop request (Ctrl-C) ends the campaign after the runs in flight; a shrink in progress
//! returns the smallest failing trace so far; every finding is kept and the checkpoint lets a
//! rerun on the same directory resume where this one stopped.

mod campaign;
mod source;
pub mod store;

use std::path::PathBuf;
use std::sync::Arc;
use std::sync::atomic::AtomicBool;
use std::time::Duration;

use thiserror::Error;

use crate::harness::{Failure, HarnessError, Report, Target};
use crate::model::Compiled;
use crate::shrink::{ShrinkOptions, Shrunk, shrink};
use crate::trace::Trace;

pub use campaign::hunt;
pub use source::{ModelSource, RunInput, TraceSource};
pub use store::{Resume, Store};

/// Errors of a campaign.
#[derive(Debug, Error)]
pub enum HuntError {
    #[error(transparent)]
    Harness(#[from] HarnessError),
    #[error("{path}: {problem}")]
    Store { path: PathBuf, problem: String },
    #[error("{0}")]
    Options(String),
}

/// Settings of a campaign.
#[derive(Debug, Clone)]
pub struct HuntOptions {
    /// Total runs of the campaign, counting runs of earlier sessions on the same directory.
    pub runs: Option<u64>,
    /// Wall-clock time of this session.
    pub time: Option<Duration>,
    /// How to shrink new findings; `None` stores them unshrunk.
    pub shrink: Option<ShrinkOptions>,
    /// Reruns that must reproduce a new failure before it is shrunk (else it is flaky), and
    /// that must reproduce each failing candidate while shrinking.
    pub confirm: u32,
    /// Raised from outside (Ctrl-C) to stop cleanly.
    pub stop: Option<Arc<AtomicBool>>,
    /// How to replay a stored trace with the same target: the program and the arguments that
    /// follow the trace path (`tracewalk replay TRACE ARGS…`). Written to `replay.sh`.
    pub replay: Option<(String, Vec<String>)>,
}

impl Default for HuntOptions {
    fn default() -> Self {
        HuntOptions {
            runs: None,
            time: None,
            shrink: Some(ShrinkOptions::default()),
            confirm: 1,
            stop: None,
            replay: None,
        }
    }
}

/// One distinct failure of a campaign.
#[derive(Debug, Clone)]
pub struct Finding {
    pub failure: Failure,
    /// 1-based number of the run that first showed it.
    pub first_run: u64,
    /// Runs that showed it.
    pub hits: u64,
    /// Did not repeat on a rerun; not shrunk.
    pub flaky: bool,
    pub original_messages: usize,
    /// The shrunk trace (absent for flaky findings, or when shrinking was off).
    pub shrunk: Option<Trace>,
    pub shrink_runs: usize,
    /// Where it is stored, when the campaign has a directory.
    pub dir: Option<PathBuf>,
}

impl Finding {
    pub fn signature(&self) -> String {
        self.failure.signature()
    }

    pub fn original_path(&self) -> Option<PathBuf> {
        self.dir.as_ref().map(|d| d.join("original.trace"))
    }

    pub fn shrunk_path(&self) -> Option<PathBuf> {
        self.dir.as_ref().filter(|_| self.shrunk.is_some()).map(|d| d.join("shrunk.trace"))
    }
}

/// Why a campaign session ended.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum StopReason {
    Budget,
    Time,
    Interrupted,
}

impl StopReason {
    pub fn name(self) -> &'static str {
        match self {
            StopReason::Budget => "budget",
            StopReason::Time => "time",
            StopReason::Interrupted => "interrupted",
        }
    }
}

/// Progress of a campaign session.
#[derive(Debug, Clone)]
pub struct Progress {
    /// Runs of the campaign so far (including earlier sessions).
    pub runs: u64,
    /// Runs of this session.
    pub session_runs: u64,
    pub findings: usize,
    pub coverage: Option<(usize, usize)>,
    pub elapsed: Duration,
}

/// The end of a campaign session.
#[derive(Debug, Clone)]
pub struct Summary {
    pub progress: Progress,
    /// Runs done before this session (resumed from the directory).
    pub resumed_from: u64,
    pub stop: StopReason,
    /// Every finding of the campaign, in order of first run.
    pub findings: Vec<Finding>,
}

/// Hears about a campaign as it goes (for progress bars and logs). Every method has a default.
pub trait Observer {
    /// After each batch of runs.
    fn progress(&mut self, _progress: &Progress) {}
    /// A new failure is being confirmed and shrunk.
    fn shrinking(&mut self, _failure: &Failure, _run: u64) {}
    /// A new finding was stored.
    fn found(&mut self, _finding: &Finding) {}
}

/// An observer that ignores everything.
#[derive(Debug, Default)]
pub struct Quiet;
impl Observer for Quiet {}

/// Runs `messages` on `target` and, if they fail, shrinks them keeping the failure's signature;
/// a candidate counts as failing only if it fails again on each of `confirm` reruns (see
/// [`HuntOptions::confirm`]). Returns `None` when the messages do not fail. The failing report
/// is the original run's.
pub fn shrink_failure(
    target: &mut dyn Target,
    messages: &[Vec<u8>],
    model: Option<&Compiled>,
    options: &ShrinkOptions,
    confirm: u32,
) -> Result<Option<(Report, Shrunk)>, HarnessError> {
    let report = target.run(messages)?;
    let Some(failure) = &report.failure else { return Ok(None) };
    let signature = failure.signature();
    let shrunk = shrink(messages, model, options, |candidate| {
        campaign::fails_repeatably(target, candidate, &signature, confirm)
    });
    Ok(Some((report, shrunk)))
}
