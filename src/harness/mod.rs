//! Stage 6: traces → target runs → verdicts.
//!
//! A [`Target`] takes the messages of one trace and says whether it failed; targets that reply
//! message by message can also run a [`Conversation`], whose next message depends on the
//! replies so far ([`Target::converse`]). Targets here:
//!
//! - [`exec::ExecTarget`]: one process per trace; the trace's bytes on stdin, or in an owner-only
//!   temporary file whose path replaces `{file}` in the arguments;
//! - [`exec::SessionTarget`]: one process per trace, messages written one at a time, each reply
//!   read with a timeout;
//! - [`tcp::TcpTarget`]: one connection per trace to a loopback server, optionally started and
//!   restarted by tracewalk;
//! - any Rust value implementing [`Target`] (e.g. [`property::FnTarget`] around a closure).
//!
//! Process targets record an [`Observation`] (how the process ended, bounded output, replies)
//! and [`Oracles`] turn it into a [`Failure`] or none. A failure's *signature* (kind plus a
//! normalised location) is what findings are deduplicated by and what shrinking preserves.
//!
//! Processes start in their own process group, the group is killed when the run ends, every
//! wait has a deadline and captured output is bounded; see [`process`].

pub mod command;
pub mod exec;
pub mod oracle;
pub mod process;
pub mod property;
mod reply;
mod sys;
pub mod tcp;

use std::net::{SocketAddr, ToSocketAddrs};
use std::time::Duration;

use thiserror::Error;

pub use command::{CommandError, CommandLine, shell_quote};
pub use oracle::{ExitCodes, Observation, Oracles, ProcessEnd, Reply, ReplyEnd, StatusClass};
pub use process::Captured;
pub use reply::ReplyFraming;
pub use sys::{Limits, default_sigpipe, interrupt_flag, signal_name};

/// Errors of the harness stage: the target could not be driven at all (as opposed to a
/// failure of the target, which is a [`Failure`]).
#[derive(Debug, Error)]
pub enum HarnessError {
    #[error("bad command `{text}`: {source}")]
    Command { text: String, source: CommandError },
    #[error("cannot start `{program}`: {source}")]
    Spawn { program: String, source: std::io::Error },
    #[error("cannot write the trace to a temporary file: {0}")]
    TempFile(std::io::Error),
    #[error(
        "{addr}: not a loopback address; tracewalk talks only to this machine unless --allow-remote is given"
    )]
    Remote { addr: String },
    #[error("{addr}: cannot resolve: {problem}")]
    Resolve { addr: String, problem: String },
    #[error("{addr}: cannot connect: {source}{hint}")]
    Connect { addr: SocketAddr, source: std::io::Error, hint: &'static str },
    #[error("server `{program}` did not accept connections on {addr} within {waited_ms} ms{detail}")]
    NotListening { program: String, addr: SocketAddr, waited_ms: u128, detail: String },
    #[error("{0}")]
    Setup(String),
}

/// Why a run failed. Two failures are the same bug when their signatures are equal.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Failure {
    /// What kind of failure: `signal SIGSEGV`, `exit 101`, `timeout`, `memory`,
    /// `stderr match`, `reply match`, `status 5xx`, `no reply`, `cut reply`, `property`.
    pub kind: String,
    /// Where: a panic location (`src/x.rs:10:5`) or the normalised first error line; may be empty.
    pub location: String,
    /// The first error line as the target wrote it (for people; not part of the signature).
    pub detail: String,
}

impl Failure {
    /// Kind and location: the deduplication key.
    pub fn signature(&self) -> String {
        if self.location.is_empty() { self.kind.clone() } else { format!("{}: {}", self.kind, self.location) }
    }
}

/// The result of one run.
#[derive(Debug, Clone, Default)]
pub struct Report {
    /// `None` when the run passed every oracle.
    pub failure: Option<Failure>,
    /// Readable record of what the target did (exit, bounded output, replies), for storage.
    pub transcript: Vec<u8>,
    pub elapsed: Duration,
}

/// Something that runs traces: a trace's messages in, a verdict out.
///
/// Contract: `run` must not panic for any input and should be deterministic (same messages,
/// same verdict) for shrinking and parallel campaigns to be meaningful. `Err` means the target
/// could not be driven at all (it cannot be started, a server is gone); campaigns stop on it.
pub trait Target {
    fn run(&mut self, messages: &[Vec<u8>]) -> Result<Report, HarnessError>;

    /// One line saying what the target is.
    fn describe(&self) -> String {
        "in-process target".to_string()
    }

    /// Whether the target answers message by message, so that a [`Conversation`] can hear each
    /// reply before it chooses the next message. False by default.
    fn replies(&self) -> bool {
        false
    }

    /// Runs one session whose messages may depend on the target's replies: the conversation
    /// is asked for a message, the message is sent, its reply is read (with the framing and
    /// timeouts of [`Target::run`]) and handed back, and so on until the conversation has no
    /// more messages or the target stops answering. Same contract as [`Target::run`]; a
    /// target that [`replies`](Target::replies) must give the same verdict as `run` on the
    /// messages the conversation handed out.
    ///
    /// The default, for targets that take a whole trace at once: every message is collected
    /// first (no replies are observed), then [`Target::run`].
    fn converse(&mut self, conversation: &mut dyn Conversation) -> Result<Report, HarnessError> {
        let mut messages = Vec::new();
        while let Some(m) = conversation.next_message() {
            messages.push(m);
        }
        self.run(&messages)
    }
}

/// A session told as it goes: the next message may depend on what the target answered to the
/// earlier ones (see [`Target::converse`]). Pull rather than push, so that the target keeps
/// the timing (a reply read with its timeout, a deadline for the whole run) and the
/// conversation keeps the choice of words.
pub trait Conversation {
    /// The next message to send; `None` ends the session.
    fn next_message(&mut self) -> Option<Vec<u8>>;

    /// What the target answered to the message last handed out: the bytes read within the
    /// reply timeout, empty when it said nothing (or nothing was due). Not called for a message
    /// that could not be sent.
    fn observe_reply(&mut self, reply: &[u8]);
}

/// Fixed messages as a [`Conversation`]; the replies are kept, one per message sent.
#[derive(Debug, Clone, Default)]
pub struct Scripted<'a> {
    messages: &'a [Vec<u8>],
    next: usize,
    /// The reply to each message sent, in order.
    pub replies: Vec<Vec<u8>>,
}

impl<'a> Scripted<'a> {
    pub fn new(messages: &'a [Vec<u8>]) -> Scripted<'a> {
        Scripted { messages, next: 0, replies: Vec::new() }
    }
}

impl Conversation for Scripted<'_> {
    fn next_message(&mut self) -> Option<Vec<u8>> {
        let m = self.messages.get(self.next)?.clone();
        self.next += 1;
        Some(m)
    }

    fn observe_reply(&mut self, reply: &[u8]) {
        self.replies.push(reply.to_vec());
    }
}

impl<T: Target + ?Sized> Target for Box<T> {
    fn run(&mut self, messages: &[Vec<u8>]) -> Result<Report, HarnessError> {
        (**self).run(messages)
    }
    fn describe(&self) -> String {
        (**self).describe()
    }
    fn replies(&self) -> bool {
        (**self).replies()
    }
    fn converse(&mut self, conversation: &mut dyn Conversation) -> Result<Report, HarnessError> {
        (**self).converse(conversation)
    }
}

impl<T: Target + ?Sized> Target for &mut T {
    fn run(&mut self, messages: &[Vec<u8>]) -> Result<Report, HarnessError> {
        (**self).run(messages)
    }
    fn describe(&self) -> String {
        (**self).describe()
    }
    fn replies(&self) -> bool {
        (**self).replies()
    }
    fn converse(&mut self, conversation: &mut dyn Conversation) -> Result<Report, HarnessError> {
        (**self).converse(conversation)
    }
}

/// Time limits of a process target.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Timing {
    /// Longest a whole run may take; then the process group is killed (a hang).
    pub run_timeout: Duration,
    /// Longest wait for the first byte of a reply (per-message and TCP targets).
    pub reply_timeout: Duration,
    /// Line replies end after this long without new output (unless `reply_end` matched first).
    pub reply_settle: Duration,
}

impl Default for Timing {
    fn default() -> Self {
        Timing {
            run_timeout: Duration::from_secs(5),
            reply_timeout: Duration::from_millis(250),
            reply_settle: Duration::from_millis(20),
        }
    }
}

/// Which process target to build.
#[derive(Debug, Clone)]
pub enum TargetKind {
    /// One process per trace, the trace on stdin or in `{file}`; with `per_message`, messages
    /// are written one at a time and each reply is read.
    Exec { command: CommandLine, per_message: bool },
    /// One connection per trace; `spawn` starts (and restarts) the server. `{port}` in the
    /// spawn command is replaced by the port.
    Tcp { addr: SocketAddr, spawn: Option<CommandLine>, start_timeout: Duration },
}

/// Everything needed to build process targets; one per parallel job.
#[derive(Debug, Clone)]
pub struct TargetSpec {
    pub kind: TargetKind,
    pub timing: Timing,
    pub framing: ReplyFraming,
    pub oracles: Oracles,
    pub limits: Limits,
    /// Bytes kept from the head and from the tail of each output stream.
    pub capture_limit: usize,
    /// Environment variables set for the target (on top of tracewalk's own environment).
    pub env: Vec<(String, String)>,
}

impl TargetSpec {
    /// A spec with default timing, oracles and limits.
    pub fn new(kind: TargetKind, framing: ReplyFraming) -> TargetSpec {
        TargetSpec {
            kind,
            timing: Timing::default(),
            framing,
            oracles: Oracles::default(),
            limits: Limits::default(),
            capture_limit: 32 * 1024,
            env: Vec::new(),
        }
    }

    /// Builds the target of parallel job `job` (0-based). A TCP target of job `k` uses port
    /// `port + k`, so parallel jobs need a spawn command with `{port}`.
    pub fn build(&self, job: usize) -> Result<Box<dyn Target + Send>, HarnessError> {
        sys::no_core_dumps();
        match &self.kind {
            TargetKind::Exec { command, per_message: false } => {
                Ok(Box::new(exec::ExecTarget::new(command.clone(), self.clone())))
            }
            TargetKind::Exec { command, per_message: true } => {
                Ok(Box::new(exec::SessionTarget::new(command.clone(), self.clone())))
            }
            TargetKind::Tcp { addr, spawn, start_timeout } => {
                let mut addr = *addr;
                if job > 0 {
                    if !spawn.as_ref().is_some_and(|s| s.uses("{port}")) {
                        return Err(HarnessError::Setup(
                            "parallel jobs with a TCP target need --spawn with {port} in it, so that each job gets its own server".into(),
                        ));
                    }
                    let port = u16::try_from(addr.port() as usize + job)
                        .map_err(|_| HarnessError::Setup("port number overflow for parallel jobs".into()))?;
                    addr.set_port(port);
                }
                Ok(Box::new(tcp::TcpTarget::new(addr, spawn.clone(), *start_timeout, self.clone())))
            }
        }
    }
}

/// Resolves `text` (`host:port`) to an address and refuses anything but loopback unless
/// `allow_remote`: generated traffic can damage systems, so it goes nowhere else by accident.
pub fn resolve_tcp(text: &str, allow_remote: bool) -> Result<SocketAddr, HarnessError> {
    let addrs: Vec<SocketAddr> = text
        .to_socket_addrs()
        .map_err(|e| HarnessError::Resolve { addr: text.to_string(), problem: e.to_string() })?
        .collect();
    let Some(first) = addrs.first().copied() else {
        return Err(HarnessError::Resolve { addr: text.to_string(), problem: "no addresses".into() });
    };
    if !allow_remote && !addrs.iter().all(|a| a.ip().is_loopback()) {
        return Err(HarnessError::Remote { addr: text.to_string() });
    }
    Ok(first)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_target_without_replies_hears_the_whole_conversation_at_once() {
        let mut seen = Vec::new();
        let mut target = property::FnTarget::new(|m: &[Vec<u8>]| {
            seen.push(m.to_vec());
            Ok(())
        });
        assert!(!target.replies());
        let messages = vec![b"a\n".to_vec(), b"b\n".to_vec()];
        let mut script = Scripted::new(&messages);
        let mut boxed: Box<dyn Target + '_> = Box::new(&mut target);
        assert!(boxed.converse(&mut script).unwrap().failure.is_none());
        drop(boxed);
        assert!(script.replies.is_empty(), "no replies were read");
        assert_eq!(seen, vec![messages]);
    }

    #[test]
    fn refuses_remote_addresses_unless_allowed() {
        assert!(resolve_tcp("127.0.0.1:80", false).is_ok());
        assert!(resolve_tcp("[::1]:80", false).is_ok());
        assert!(matches!(resolve_tcp("192.0.2.7:80", false), Err(HarnessError::Remote { .. })));
        assert!(resolve_tcp("192.0.2.7:80", true).is_ok());
        assert!(matches!(resolve_tcp("no port here", false), Err(HarnessError::Resolve { .. })));
    }
}
