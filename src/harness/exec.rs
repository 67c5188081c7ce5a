//! Process targets: one process per trace.

use std::io::Write;
use std::process::{Command, Stdio};
use std::sync::mpsc;
use std::time::{Duration, Instant};

use super::oracle::{Observation, ProcessEnd, ReplyEnd};
use super::process::{Bounded, Collector, Proc};
use super::reply::{ChunkSource, read_after_end_of_input, read_reply};
use super::{CommandLine, Conversation, HarnessError, Report, Scripted, Target, TargetSpec};

/// How long output may keep arriving after a process ended. Descendants are killed with it, so
/// the pipes normally reach their end at once and this is no wait at all; it bounds the wait for
/// one that escaped its group, and leaves a loaded machine time to schedule the reader threads
/// (a panic message read too late would change the failure's signature).
const DRAIN_GRACE: Duration = Duration::from_secs(1);

/// Inputs up to this size are written to stdin directly: a pipe holds at least one page.
const SMALL_INPUT: usize = 4096;

/// Runs the program once per trace with the trace's bytes on stdin, or in an owner-only
/// temporary file whose path replaces `{file}` in the arguments (stdin is then empty).
#[derive(Debug)]
pub struct ExecTarget {
    command: CommandLine,
    spec: TargetSpec,
}

impl ExecTarget {
    pub fn new(command: CommandLine, spec: TargetSpec) -> ExecTarget {
        ExecTarget { command, spec }
    }
}

fn spawn(
    command: &CommandLine,
    file: Option<&std::path::Path>,
    spec: &TargetSpec,
) -> Result<Proc, HarnessError> {
    let argv = match file {
        Some(path) => command.argv_with(&[("{file}", path.as_os_str())]),
        None => command.argv_with(&[]),
    };
    let mut cmd = Command::new(&argv[0]);
    cmd.envs(spec.env.iter().map(|(k, v)| (k, v)));
    cmd.args(&argv[1..])
        .stdin(if file.is_some() { Stdio::null() } else { Stdio::piped() })
        .stdout(Stdio::piped())
        .stderr(Stdio::piped());
    Proc::spawn(cmd, spec.limits)
        .map_err(|source| HarnessError::Spawn { program: command.program().to_string(), source })
}

impl Target for ExecTarget {
    fn run(&mut self, messages: &[Vec<u8>]) -> Result<Report, HarnessError> {
        let start = Instant::now();
        let deadline = start + self.spec.timing.run_timeout;
        let input = messages.concat();
        let file = if self.command.uses("{file}") {
            let mut f = tempfile::Builder::new()
                .prefix("tracewalk-")
                .suffix(".trace-bytes")
                .tempfile()
                .map_err(HarnessError::TempFile)?;
            f.write_all(&input).and_then(|_| f.flush()).map_err(HarnessError::TempFile)?;
            Some(f)
        } else {
            None
        };
        let mut proc = spawn(&self.command, file.as_ref().map(|f| f.path()), &self.spec)?;
        let limit = self.spec.capture_limit;
        let stdout = Collector::start(proc.child().stdout.take().expect("piped"), limit);
        let stderr = Collector::start(proc.child().stderr.take().expect("piped"), limit);
        if let Some(mut stdin) = proc.child().stdin.take() {
            if input.len() <= SMALL_INPUT {
                // Fits the pipe buffer: the write cannot block even if the target never reads.
                let _ = stdin.write_all(&input);
            } else {
                // A target that never reads would block this write; it ends when the group is killed.
                std::thread::spawn(move || {
                    let _ = stdin.write_all(&input);
                });
            }
        }
        // The end of stdout usually means the process is exiting; but a child it left behind
        // may hold stdout open, so watch for its exit too.
        let mut nap = Duration::from_micros(50);
        while !stdout.wait_end((Instant::now() + nap).min(deadline))
            && proc.try_status().is_none()
            && Instant::now() < deadline
        {
            nap = (nap * 2).min(Duration::from_millis(5));
        }
        let end = match proc.wait_until(deadline) {
            Some(status) => ProcessEnd::from_status(status),
            None => {
                proc.kill();
                ProcessEnd::TimedOut
            }
        };
        let grace = Instant::now() + DRAIN_GRACE;
        let mut o = Observation::new(end);
        o.stdout = stdout.finish(grace);
        o.stderr = stderr.finish(grace);
        o.elapsed = start.elapsed();
        drop(file);
        Ok(Report { failure: self.spec.oracles.judge(&o), transcript: o.transcript(), elapsed: o.elapsed })
    }

    fn describe(&self) -> String {
        format!("exec {}", self.command.text)
    }
}

/// Runs the program once per trace and talks to it message by message: each message is written
/// to stdin, then its reply is read from stdout (see [`super::ReplyFraming`]).
#[derive(Debug)]
pub struct SessionTarget {
    command: CommandLine,
    spec: TargetSpec,
}

impl SessionTarget {
    pub fn new(command: CommandLine, spec: TargetSpec) -> SessionTarget {
        SessionTarget { command, spec }
    }
}

impl Target for SessionTarget {
    fn run(&mut self, messages: &[Vec<u8>]) -> Result<Report, HarnessError> {
        self.converse(&mut Scripted::new(messages))
    }

    fn replies(&self) -> bool {
        true
    }

    fn converse(&mut self, conversation: &mut dyn Conversation) -> Result<Report, HarnessError> {
        let start = Instant::now();
        let spec = &self.spec;
        let deadline = start + spec.timing.run_timeout;
        let mut proc = spawn(&self.command, None, spec)?;
        let mut replies_in = super::process::stream(proc.child().stdout.take().expect("piped"));
        let stderr = Collector::start(proc.child().stderr.take().expect("piped"), spec.capture_limit);
        let mut stdin = proc.child().stdin.take().expect("piped");
        let (sender, writer_in) = mpsc::channel::<Vec<u8>>();
        let mut to_writer = Some(sender);
        std::thread::spawn(move || {
            for message in writer_in {
                if stdin.write_all(&message).and_then(|_| stdin.flush()).is_err() {
                    break;
                }
            }
        });
        let mut o = Observation::new(ProcessEnd::Running);
        o.replies_required = spec.framing.required();
        let mut timed_out = false;
        let mut sent: Vec<u8> = Vec::new();
        let mut answered = 0;
        loop {
            if Instant::now() >= deadline {
                timed_out = true;
                break;
            }
            let Some(message) = conversation.next_message() else { break };
            sent.extend_from_slice(&message);
            if to_writer.as_ref().is_none_or(|w| w.send(message).is_err()) {
                break;
            }
            let due = spec.framing.replies_due(&sent);
            if due <= answered {
                o.replies.push(super::Reply { bytes: Vec::new(), end: ReplyEnd::NotDue });
                conversation.observe_reply(&[]);
                continue;
            }
            let owed = due - answered;
            answered = due;
            let mut reply =
                read_reply(&mut replies_in, &spec.framing, &spec.timing, deadline, spec.capture_limit, owed);
            let mut stop = matches!(reply.end, ReplyEnd::Closed | ReplyEnd::Cut);
            if matches!(reply.end, ReplyEnd::Silent | ReplyEnd::Stalled) && spec.framing.required() {
                // As for TCP: end the input; a program that then answers or exits was waiting.
                to_writer = None;
                reply = read_after_end_of_input(
                    &mut replies_in,
                    &spec.framing,
                    &spec.timing,
                    deadline,
                    spec.capture_limit,
                    owed,
                    reply,
                );
                stop = true;
            }
            conversation.observe_reply(&reply.bytes);
            o.replies.push(reply);
            if stop {
                break;
            }
        }
        drop(to_writer);
        // Whatever the program writes after its last reply, until it exits.
        let mut rest = Bounded::new(spec.capture_limit);
        while !timed_out {
            let wait = deadline.saturating_duration_since(Instant::now());
            if wait.is_zero() {
                timed_out = true;
                break;
            }
            match replies_in.next_chunk(wait) {
                super::reply::Chunk::Data(d) => rest.push(&d),
                super::reply::Chunk::Timeout => {}
                super::reply::Chunk::Closed => break,
            }
        }
        drop(replies_in);
        o.end = match (timed_out, proc.wait_until(deadline)) {
            (false, Some(status)) => ProcessEnd::from_status(status),
            _ => {
                proc.kill();
                ProcessEnd::TimedOut
            }
        };
        o.stdout = rest.captured();
        o.stderr = stderr.finish(Instant::now() + DRAIN_GRACE);
        o.elapsed = start.elapsed();
        Ok(Report { failure: spec.oracles.judge(&o), transcript: o.transcript(), elapsed: o.elapsed })
    }

    fn describe(&self) -> String {
        format!("exec {} (message by message)", self.command.text)
    }
}
