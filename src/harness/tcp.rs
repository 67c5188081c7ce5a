//! TCP targets: one connection per trace, each message written and its reply read.
//!
//! With a spawn command tracewalk starts the server itself, waits until the port accepts,
//! reads its stderr (bounded), sees it crash (the connection drops and the process exits) and
//! starts it again before the next run. A server that stops answering is killed and restarted
//! too, so one hang does not spoil the runs after it.

use std::io::Write;
use std::net::{SocketAddr, TcpStream};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use super::oracle::{Observation, ProcessEnd, ReplyEnd};
use super::process::{Collector, Proc};
use super::reply::{read_after_end_of_input, read_reply};
use super::{CommandLine, Conversation, HarnessError, Report, Scripted, Target, TargetSpec};

/// How long a crashing server may take to be seen as exited after the connection dropped.
const EXIT_GRACE: Duration = Duration::from_millis(500);
/// How long a server that closed the connection without a word may take to be seen as exited
/// (a panicking Rust server drops its connections while unwinding, just before it exits). Short,
/// because many servers close quietly on input they dislike and live on; a server that also
/// wrote to stderr during the run (a panic message, a backtrace) gets the full [`EXIT_GRACE`]:
/// on a loaded machine a dying server can take a few hundred milliseconds to exit, and a crash
/// seen late is either missed or blamed on the next trace.
const CLOSE_GRACE: Duration = Duration::from_millis(100);
/// The longer wait for a server that wrote to stderr during the grace above but did not exit.
const DYING_GRACE: Duration = Duration::from_secs(3);

#[derive(Debug)]
struct Server {
    proc: Proc,
    stderr: Collector,
}

/// A TCP server target.
#[derive(Debug)]
pub struct TcpTarget {
    addr: SocketAddr,
    spawn: Option<CommandLine>,
    start_timeout: Duration,
    spec: TargetSpec,
    server: Option<Server>,
}

impl TcpTarget {
    pub fn new(
        addr: SocketAddr,
        spawn: Option<CommandLine>,
        start_timeout: Duration,
        spec: TargetSpec,
    ) -> TcpTarget {
        TcpTarget { addr, spawn, start_timeout, spec, server: None }
    }

    /// Starts the server if tracewalk owns it and it is not running.
    fn ensure_server(&mut self) -> Result<(), HarnessError> {
        let Some(command) = &self.spawn else { return Ok(()) };
        if let Some(server) = &mut self.server {
            if server.proc.try_status().is_none() {
                return Ok(());
            }
            self.server = None;
        }
        if TcpStream::connect_timeout(&self.addr, Duration::from_millis(100)).is_ok() {
            return Err(HarnessError::Setup(format!(
                "something already accepts connections on {}; stop it (an old server?) or leave out --spawn to test it as it is",
                self.addr
            )));
        }
        let port = self.addr.port().to_string();
        let argv = command.argv_with(&[("{port}", port.as_ref())]);
        let mut cmd = Command::new(&argv[0]);
        cmd.envs(self.spec.env.iter().map(|(k, v)| (k, v)));
        cmd.args(&argv[1..]).stdin(Stdio::null()).stdout(Stdio::null()).stderr(Stdio::piped());
        let mut proc = Proc::spawn(cmd, self.spec.limits)
            .map_err(|source| HarnessError::Spawn { program: command.program().to_string(), source })?;
        let stderr = Collector::start(proc.child().stderr.take().expect("piped"), self.spec.capture_limit);
        let start = Instant::now();
        loop {
            if TcpStream::connect_timeout(&self.addr, Duration::from_millis(200)).is_ok() {
                break;
            }
            let exited = proc.try_status();
            if exited.is_some() || start.elapsed() >= self.start_timeout {
                proc.kill();
                let text = stderr.finish(Instant::now() + Duration::from_millis(100)).bytes();
                let first = String::from_utf8_lossy(&text)
                    .lines()
                    .find(|l| !l.trim().is_empty())
                    .unwrap_or("")
                    .to_string();
                let mut detail = match exited {
                    Some(status) => format!(" (it exited: {status})"),
                    None => String::new(),
                };
                if !first.is_empty() {
                    detail.push_str(&format!("; it wrote: {first}"));
                }
                return Err(HarnessError::NotListening {
                    program: command.text.clone(),
                    addr: self.addr,
                    waited_ms: start.elapsed().as_millis(),
                    detail,
                });
            }
            std::thread::sleep(Duration::from_millis(5));
        }
        self.server = Some(Server { proc, stderr });
        Ok(())
    }
}

/// True when a response in `reply` announces that the server closes the connection.
fn closes_connection(reply: &[u8]) -> bool {
    reply.split(|&b| b == b'\n').any(|line| {
        let line = String::from_utf8_lossy(line).to_ascii_lowercase();
        line.starts_with("connection:") && line.contains("close")
    })
}

impl Target for TcpTarget {
    fn run(&mut self, messages: &[Vec<u8>]) -> Result<Report, HarnessError> {
        self.converse(&mut Scripted::new(messages))
    }

    fn replies(&self) -> bool {
        true
    }

    fn converse(&mut self, conversation: &mut dyn Conversation) -> Result<Report, HarnessError> {
        // The run's time starts once the server accepts: a slow start is not the run's hang
        // (and must not leave a connect with no time at all).
        self.ensure_server()?;
        let start = Instant::now();
        let deadline = start + self.spec.timing.run_timeout;
        if let Some(server) = &self.server {
            server.stderr.clear();
        }
        let spec = &self.spec;
        let mut o = Observation::new(ProcessEnd::Running);
        o.replies_required = spec.framing.required();
        let mut timed_out = false;
        let connect_wait = deadline
            .saturating_duration_since(Instant::now())
            .clamp(Duration::from_millis(1), Duration::from_secs(2));
        match TcpStream::connect_timeout(&self.addr, connect_wait) {
            Ok(mut stream) => {
                let _ = stream.set_nodelay(true);
                let mut sent: Vec<u8> = Vec::new();
                let mut answered = 0;
                loop {
                    let left = deadline.saturating_duration_since(Instant::now());
                    if left.is_zero() {
                        timed_out = true;
                        break;
                    }
                    let Some(message) = conversation.next_message() else { break };
                    let _ = stream.set_write_timeout(Some(left));
                    if stream.write_all(&message).is_err() {
                        o.replies.push(super::Reply { bytes: Vec::new(), end: ReplyEnd::Closed });
                        break;
                    }
                    sent.extend_from_slice(&message);
                    let due = spec.framing.replies_due(&sent);
                    if due <= answered {
                        o.replies.push(super::Reply { bytes: Vec::new(), end: ReplyEnd::NotDue });
                        conversation.observe_reply(&[]);
                        continue;
                    }
                    let owed = due - answered;
                    answered = due;
                    let mut reply = read_reply(
                        &mut stream,
                        &spec.framing,
                        &spec.timing,
                        deadline,
                        spec.capture_limit,
                        owed,
                    );
                    let mut stop = matches!(reply.end, ReplyEnd::Closed | ReplyEnd::Cut)
                        || closes_connection(&reply.bytes);
                    if matches!(reply.end, ReplyEnd::Silent | ReplyEnd::Stalled) {
                        // Silence may mean the server waits for input we will never send (it
                        // parsed the stream differently): tell it the input ended.
                        let _ = stream.shutdown(std::net::Shutdown::Write);
                        reply = read_after_end_of_input(
                            &mut stream,
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
                    if Instant::now() >= deadline {
                        timed_out = true;
                    }
                    if stop || timed_out {
                        break;
                    }
                }
            }
            // A loopback connect that times out reached a listener that does not accept (its
            // queue is full): the target hangs. Refused means nobody listens.
            Err(source) if source.kind() == std::io::ErrorKind::TimedOut && self.addr.ip().is_loopback() => {
                timed_out = true;
            }
            Err(source) => {
                let server_died = self.server.as_mut().is_some_and(|s| s.proc.try_status().is_some());
                if !server_died {
                    let hint = if self.spawn.is_none() {
                        " (is the server running? --spawn can start it)"
                    } else {
                        ""
                    };
                    return Err(HarnessError::Connect { addr: self.addr, source, hint });
                }
            }
        }
        // How long to watch a spawned server for a crash: a peer that went silent or cut a
        // reply may be dying; one that closed without a word may be unwinding from a panic;
        // one that answered everything, or announced the close, is fine.
        let hung = timed_out
            || o.replies
                .iter()
                .any(|r| matches!(r.end, ReplyEnd::Silent | ReplyEnd::Stalled | ReplyEnd::Cut));
        let quiet_close =
            o.replies.last().is_some_and(|r| r.end == ReplyEnd::Closed && !closes_connection(&r.bytes));
        if let Some(server) = &mut self.server {
            // The collector was cleared when the run began: this is the run's stderr.
            let wrote = !server.stderr.snapshot().is_empty();
            let grace = if hung || (quiet_close && wrote) {
                EXIT_GRACE
            } else if quiet_close {
                CLOSE_GRACE
            } else {
                Duration::ZERO
            };
            let written = server.stderr.snapshot().total;
            let mut exited =
                server.proc.wait_until((Instant::now() + grace).min(deadline.max(Instant::now())));
            if exited.is_none() && !grace.is_zero() && server.stderr.snapshot().total > written {
                // It closed or stopped answering, then wrote to stderr without exiting: most
                // likely dying slowly (a backtrace on a loaded machine). Wait longer.
                exited = server.proc.wait_until(Instant::now() + DYING_GRACE);
            }
            match exited {
                Some(status) => {
                    o.end = ProcessEnd::from_status(status);
                    o.stderr = server.stderr.finish(Instant::now() + Duration::from_millis(200));
                    self.server = None;
                }
                None => {
                    o.stderr = server.stderr.snapshot();
                    if hung {
                        // A server that stopped answering would spoil the next runs: restart it.
                        server.proc.kill();
                        self.server = None;
                        if timed_out {
                            o.end = ProcessEnd::TimedOut;
                        }
                    }
                }
            }
        } else if timed_out {
            o.end = ProcessEnd::TimedOut;
        }
        o.elapsed = start.elapsed();
        Ok(Report { failure: spec.oracles.judge(&o), transcript: o.transcript(), elapsed: o.elapsed })
    }

    fn describe(&self) -> String {
        match &self.spawn {
            Some(c) => format!("tcp {} (server: {})", self.addr, c.text),
            None => format!("tcp {}", self.addr),
        }
    }
}
