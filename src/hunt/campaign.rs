//! The campaign loop.

use std::sync::Mutex;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::time::{Duration, Instant};

use rustc_hash::FxHashMap;

use super::source::RunInput;
use super::store::{Resume, Store, StoredFinding};
use super::{Finding, HuntError, HuntOptions, Observer, Progress, StopReason, Summary, TraceSource};
use crate::generate::live::LiveSession;
use crate::harness::{Conversation, Failure, HarnessError, Report, Scripted, Target, shell_quote};
use crate::model::Compiled;
use crate::shrink::shrink;
use crate::trace::{Trace, TraceMessage};

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
    // A target that answers message by message can hear live sessions (when the source makes
    // them); any other gets fixed traces.
    let replies = targets[0].replies();
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
        let planned: Vec<RunInput> = (runs..runs + batch)
            .map(|i| if replies { source.run_input(i) } else { RunInput::Fixed(source.trace(i)) })
            .collect();
        let mut played =
            planned.into_iter().map(|p| Played::new(p, source.model())).collect::<Result<Vec<_>, _>>()?;
        let results = execute(targets, &mut played, options.stop.as_deref());
        let sent: Vec<(Trace, Vec<Vec<u8>>)> = played.into_iter().map(Played::sent).collect();
        for ((trace, messages), result) in sent.into_iter().zip(results) {
            let messages = &messages;
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

/// One run's input, ready to play: fixed messages, or a live session over the source's model.
enum Played<'m> {
    Fixed { trace: Trace, messages: Vec<Vec<u8>> },
    Live { session: Box<LiveSession<'m>>, header: Vec<(String, String)> },
}

impl<'m> Played<'m> {
    fn new(input: RunInput, model: Option<&'m Compiled>) -> Result<Played<'m>, HuntError> {
        Ok(match input {
            RunInput::Fixed(trace) => {
                let messages = requests(&trace);
                Played::Fixed { trace, messages }
            }
            RunInput::Live { walk, header } => {
                let model = model.ok_or_else(|| {
                    HuntError::Options("a live session needs the model of the trace source".into())
                })?;
                let session = LiveSession::new(model, walk).map_err(|e| HuntError::Options(e.to_string()))?;
                Played::Live { session: Box::new(session), header }
            }
        })
    }

    fn play(&mut self, target: &mut dyn Target) -> RunResult {
        match self {
            Played::Fixed { messages, .. } => target.run(messages),
            Played::Live { session, .. } => target.converse(session.as_mut()),
        }
    }

    /// The trace as sent (a live session's requests with the replies it heard, marked
    /// `reply`) and the messages sent: what confirming, shrinking and replay send again.
    fn sent(self) -> (Trace, Vec<Vec<u8>>) {
        match self {
            Played::Fixed { trace, messages } => (trace, messages),
            Played::Live { session, header } => {
                let mut trace = session.trace();
                trace.header = header;
                let messages = requests(&trace);
                (trace, messages)
            }
        }
    }
}

/// The messages of a trace that are sent (not those marked `reply`).
fn requests(trace: &Trace) -> Vec<Vec<u8>> {
    trace.messages.iter().filter(|m| !m.is_reply()).map(|m| m.bytes.clone()).collect()
}

impl Conversation for LiveSession<'_> {
    fn next_message(&mut self) -> Option<Vec<u8>> {
        LiveSession::next_message(self)
    }

    fn observe_reply(&mut self, reply: &[u8]) {
        LiveSession::observe_reply(self, reply)
    }
}

/// Runs each input on the targets, in parallel when there are several. `None` marks inputs not
/// run because a stop was requested.
fn execute(
    targets: &mut [Box<dyn Target + Send>],
    inputs: &mut [Played<'_>],
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
                out.push(Some(input.play(target)));
            }
        }
        return out;
    }
    let next = AtomicUsize::new(0);
    let count = inputs.len();
    let slots: Vec<Mutex<(&mut Played<'_>, Option<RunResult>)>> =
        inputs.iter_mut().map(|p| Mutex::new((p, None))).collect();
    std::thread::scope(|scope| {
        for target in targets.iter_mut() {
            let (next, slots) = (&next, &slots);
            scope.spawn(move || {
                loop {
                    if stopped() {
                        break;
                    }
                    let i = next.fetch_add(1, Ordering::Relaxed);
                    if i >= count {
                        break;
                    }
                    let mut slot = slots[i].lock().unwrap_or_else(|e| e.into_inner());
                    let result = slot.0.play(target);
                    slot.1 = Some(result);
                }
            });
        }
    });
    slots.into_iter().map(|s| s.into_inner().unwrap_or_else(|e| e.into_inner()).1).collect()
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
        // Shrinking works on the bytes sent, live sessions included: the shrinker's candidates
        // are fixed messages, so a copied value stays what the first run's target issued. A
        // target that issues the same values for the same session (ids from a fixed seed, a
        // counter) keeps failing on them; when dropping a message would change the values it
        // issues later, the copies go stale, the candidate passes, and the message is kept.
        let shrunk = shrink(messages, model, shrink_options, |candidate| {
            fails_repeatably(target.as_mut(), candidate, &signature, options.confirm)
        });
        shrink_runs = shrunk.calls;
        let mut trace = shrunk.to_trace(&sent_requests(&original), model);
        trace.set("shrunk-from", format!("{} messages", messages.len()));
        trace.set("shrink-runs", shrunk.calls.to_string());
        if !shrunk.complete {
            trace.set("shrink-cut", "stopped before the trace was 1-minimal");
        }
        // One more run records the shrunk trace's output (and, for a live session, the replies
        // to show in it) and checks that it still fails.
        let bytes = shrunk.bytes();
        let mut script = Scripted::new(&bytes);
        let check = target.converse(&mut script).ok();
        if original.messages.iter().any(|m| m.is_reply()) {
            trace = with_replies(trace, &script.replies);
        }
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
            shrunk_messages: finding.shrunk.as_ref().map(|t| t.wire_messages()),
            shrink_runs,
        })?;
        finding.dir = Some(store.finding_dir(&signature));
    }
    Ok(finding)
}

/// The messages of `trace` that were sent, without value-flow marks: after shrinking, the
/// message numbers they name are gone, and the values are fixed bytes anyway.
fn sent_requests(trace: &Trace) -> Trace {
    let messages = trace
        .messages
        .iter()
        .filter(|m| !m.is_reply())
        .map(|m| {
            let mut m = m.clone();
            m.marks.retain(|k| !k.starts_with("flow:") && !k.starts_with("flow-broken:"));
            m
        })
        .collect();
    Trace { header: trace.header.clone(), messages }
}

/// `trace` with the reply to each message (where there was one) after it, marked `reply`.
fn with_replies(mut trace: Trace, replies: &[Vec<u8>]) -> Trace {
    let mut messages = Vec::with_capacity(trace.messages.len() * 2);
    for (i, m) in trace.messages.into_iter().enumerate() {
        messages.push(m);
        if let Some(r) = replies.get(i).filter(|r| !r.is_empty()) {
            messages.push(TraceMessage { bytes: r.clone(), surprise: None, marks: vec!["reply".into()] });
        }
    }
    trace.messages = messages;
    trace
}
