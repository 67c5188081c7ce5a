//! The campaign loop.

use std::sync::Mutex;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::time::{Duration, Instant};

use rustc_hash::FxHashMap;

use super::store::{Resume, Store, StoredFinding};
use super::{Finding, HuntError, HuntOptions, Observer, Progress, StopReason, Summary, TraceSource};
use crate::harness::{Failure, HarnessError, Report, Target, shell_quote};
use crate::shrink::shrink;
use crate::trace::Trace;

/// Traces generated per batch and job: large enough to keep jobs busy, small enough that a stop
/// or a time budget is honoured quickly.
const BATCH_PER_JOB: usize = 8;
/// Least time between two checkpoints written to the campaign directory.
const CHECKPOINT_EVERY: Duration = Duration::from_millis(500);

type RunResult = Result<Report, HarnessError>;

/// Runs a campaign: traces from `source` on `targets` (one per parallel job, at least one),
/// findings stored in `store` if given. See the module documentation of [`super`].
pub fn hunt(
    source: &mut dyn TraceSource,
    targets: &mut [Box<dyn Target + Send>],
    store: Option<&Store>,
    resume: Resume,
    options: &HuntOptions,
    observer: &mut dyn Observer,
) -> Result<Summary, HuntError> {
    if targets.is_empty() {
        return Err(HuntError::Options("a campaign needs at least one target".into()));
    }
    if options.runs.is_none() && options.time.is_none() {
        return Err(HuntError::Options("give a run budget or a time budget".into()));
    }
    let start = Instant::now();
    let mut findings: Vec<Finding> = Vec::new();
    let mut by_signature: FxHashMap<String, usize> = FxHashMap::default();
    let resumed_from = resume.runs;
    for l in resume.findings {
        let shrunk =
            std::fs::read_to_string(l.dir.join("shrunk.trace")).ok().and_then(|t| Trace::parse(&t).ok());
        by_signature.insert(l.stored.signature.clone(), findings.len());
        findings.push(Finding {
            failure: Failure {
                location: location_of(&l.stored.signature, &l.stored.kind),
                kind: l.stored.kind,
                detail: l.stored.detail,
            },
            first_run: l.stored.first_run,
            hits: l.hits,
            flaky: l.stored.flaky,
            original_messages: l.stored.original_messages,
            shrunk,
            shrink_runs: l.stored.shrink_runs,
            dir: Some(l.dir),
        });
    }
    for index in 0..resumed_from {
        source.skip(index);
    }
    let stopped = || options.stop.as_ref().is_some_and(|s| s.load(Ordering::Relaxed));
    let mut runs = resumed_from;
    let mut last_checkpoint = Instant::now();
    let progress = |runs: u64, findings: usize, source: &dyn TraceSource| Progress {
        runs,
        session_runs: runs - resumed_from,
        findings,
        coverage: source.coverage(),
        elapsed: start.elapsed(),
    };
    let stop = loop {
        if stopped() {
            break StopReason::Interrupted;
        }
        if options.runs.is_some_and(|budget| runs >= budget) {
            break StopReason::Budget;
        }
        if options.time.is_some_and(|t| start.elapsed() >= t) {
            break StopReason::Time;
        }
        let mut batch = (targets.len() * BATCH_PER_JOB) as u64;
        if let Some(budget) = options.runs {
            batch = batch.min(budget - runs);
        }
        let traces: Vec<Trace> = (runs..runs + batch).map(|i| source.trace(i)).collect();
        let inputs: Vec<Vec<Vec<u8>>> =
            traces.iter().map(|t| t.messages.iter().map(|m| m.bytes.clone()).collect()).collect();
        let results = execute(targets, &inputs, options.stop.as_deref());
        for ((trace, messages), result) in traces.into_iter().zip(&inputs).zip(results) {
            let Some(result) = result else { break };
            let report = match result {
                Ok(r) => r,
                Err(e) => {
                    save_checkpoint(store, runs, &findings)?;
                    return Err(e.into());
                }
            };
            runs += 1;
            let Some(failure) = report.failure.clone() else { continue };
            let signature = failure.signature();
            if let Some(&i) = by_signature.get(&signature) {
                // A finding stored by an interrupted session is met again at its own run.
                if runs > findings[i].first_run {
                    findings[i].hits += 1;
                }
                continue;
            }
            observer.shrinking(&failure, runs);
            let finding =
                new_finding(source, &mut targets[0], store, options, trace, messages, failure, report, runs)?;
            observer.found(&finding);
            by_signature.insert(signature, findings.len());
            findings.push(finding);
        }
        if last_checkpoint.elapsed() >= CHECKPOINT_EVERY {
            save_checkpoint(store, runs, &findings)?;
            last_checkpoint = Instant::now();
        }
        observer.progress(&progress(runs, findings.len(), source));
    };
    save_checkpoint(store, runs, &findings)?;
    let progress = progress(runs, findings.len(), source);
    observer.progress(&progress);
    findings.sort_by_key(|f| f.first_run);
    Ok(Summary { progress, resumed_from, stop, findings })
}

/// The location part of a stored signature (`kind: location`).
fn location_of(signature: &str, kind: &str) -> String {
    signature.strip_prefix(kind).and_then(|rest| rest.strip_prefix(": ")).unwrap_or("").to_string()
}

fn save_checkpoint(store: Option<&Store>, runs: u64, findings: &[Finding]) -> Result<(), HuntError> {
    let Some(store) = store else { return Ok(()) };
    let hits: Vec<(String, u64)> = findings.iter().map(|f| (f.signature(), f.hits)).collect();
    store.checkpoint(runs, hits.iter().map(|(s, n)| (s.as_str(), *n)))
}

/// Runs each input on the targets, in parallel when there are several. `None` marks inputs not
/// run because a stop was requested.
fn execute(
    targets: &mut [Box<dyn Target + Send>],
    inputs: &[Vec<Vec<u8>>],
    stop: Option<&AtomicBool>,
) -> Vec<Option<RunResult>> {
    let stopped = || stop.is_some_and(|s| s.load(Ordering::Relaxed));
    if targets.len() == 1 || inputs.len() <= 1 {
        let target = &mut targets[0];
        let mut out = Vec::with_capacity(inputs.len());
        for input in inputs {
            if stopped() {
                out.push(None);
            } else {
                out.push(Some(target.run(input)));
            }
        }
        return out;
    }
    let next = AtomicUsize::new(0);
    let slots: Vec<Mutex<Option<RunResult>>> = inputs.iter().map(|_| Mutex::new(None)).collect();
    std::thread::scope(|scope| {
        for target in targets.iter_mut() {
            let (next, slots) = (&next, &slots);
            scope.spawn(move || {
                loop {
                    if stopped() {
                        break;
                    }
                    let i = next.fetch_add(1, Ordering::Relaxed);
                    let Some(input) = inputs.get(i) else { break };
                    let result = target.run(input);
                    *slots[i].lock().unwrap_or_else(|e| e.into_inner()) = Some(result);
                }
            });
        }
    });
    slots.into_iter().map(|s| s.into_inner().unwrap_or_else(|e| e.into_inner())).collect()
}

fn same_failure(target: &mut dyn Target, messages: &[Vec<u8>], signature: &str) -> bool {
    target.run(messages).ok().and_then(|r| r.failure).is_some_and(|f| f.signature() == signature)
}

/// The shrinking predicate: `candidate` fails with `signature`, and again on each of `confirm`
/// reruns. A candidate that passes costs one run; one that fails is rerun, so a failure seen in
/// the wrong run (a server still dying of the previous trace when the next one connects) or a
/// flaky one cannot steer shrinking toward a trace that does not fail by itself.
pub(super) fn fails_repeatably(
    target: &mut dyn Target,
    candidate: &[Vec<u8>],
    signature: &str,
    confirm: u32,
) -> bool {
    (0..=confirm).all(|_| same_failure(target, candidate, signature))
}

/// Confirms, shrinks and stores a new failure.
#[allow(clippy::too_many_arguments)]
fn new_finding(
    source: &dyn TraceSource,
    target: &mut Box<dyn Target + Send>,
    store: Option<&Store>,
    options: &HuntOptions,
    mut original: Trace,
    messages: &[Vec<u8>],
    failure: Failure,
    report: Report,
    run: u64,
) -> Result<Finding, HuntError> {
    let signature = failure.signature();
    let flaky = (0..options.confirm).any(|_| !same_failure(target, messages, &signature));
    original.set("run", run.to_string());
    original.set("outcome", "fail");
    original.set("kind", failure.kind.clone());
    original.set("signature", signature.clone());
    if flaky {
        original.set("flaky", "did not fail again on a rerun");
    }
    let model = source.model();
    let mut shrunk_trace = None;
    let mut shrink_runs = 0;
    let mut shrunk_report = None;
    if let (false, Some(shrink_options)) = (flaky, &options.shrink) {
        let shrunk = shrink(messages, model, shrink_options, |candidate| {
            fails_repeatably(target.as_mut(), candidate, &signature, options.confirm)
        });
        shrink_runs = shrunk.calls;
        let mut trace = shrunk.to_trace(&original, model);
        trace.set("shrunk-from", format!("{} messages", messages.len()));
        trace.set("shrink-runs", shrunk.calls.to_string());
        if !shrunk.complete {
            trace.set("shrink-cut", "stopped before the trace was 1-minimal");
        }
        // One more run records the shrunk trace's output and checks that it still fails.
        let check = target.run(&shrunk.bytes()).ok();
        if check.as_ref().and_then(|r| r.failure.as_ref()).is_none_or(|f| f.signature() != signature) {
            trace.set("replay-check", "did not fail again when rerun");
        }
        shrunk_report = check;
        shrunk_trace = Some(trace);
    }
    let mut finding = Finding {
        failure,
        first_run: run,
        hits: 1,
        flaky,
        original_messages: messages.len(),
        shrunk: shrunk_trace,
        shrink_runs,
        dir: None,
    };
    if let Some(store) = store {
        store.write_file(&signature, "original.trace", original.to_text().as_bytes())?;
        store.write_file(&signature, "output.txt", &report.transcript)?;
        let replay_target = match &finding.shrunk {
            Some(trace) => {
                if let Some(r) = &shrunk_report {
                    store.write_file(&signature, "shrunk-output.txt", &r.transcript)?;
                }
                store.write_file(&signature, "shrunk.trace", trace.to_text().as_bytes())?
            }
            None => store.finding_dir(&signature).join("original.trace"),
        };
        if let Some((program, args)) = &options.replay {
            let path = std::path::absolute(&replay_target).unwrap_or(replay_target);
            let mut line =
                format!("{} replay {}", shell_quote(program), shell_quote(&path.to_string_lossy()));
            for a in args {
                line.push(' ');
                line.push_str(&shell_quote(a));
            }
            let script =
                format!("#!/bin/sh\n# Replays: {signature}\n# Exit status 1 means it still fails.\n{line}\n");
            store.write_file(&signature, "replay.sh", script.as_bytes())?;
        }
        store.finish_finding(&StoredFinding {
            signature: signature.clone(),
            kind: finding.failure.kind.clone(),
            detail: finding.failure.detail.clone(),
            first_run: run,
            flaky,
            original_messages: messages.len(),
            shrunk_messages: finding.shrunk.as_ref().map(|t| t.messages.len()),
            shrink_runs,
        })?;
        finding.dir = Some(store.finding_dir(&signature));
    }
    Ok(finding)
}
