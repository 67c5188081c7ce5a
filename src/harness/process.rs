//! Child processes in their own group, waited for with deadlines, with bounded output capture.
//!
//! A target may hang, fork children that keep its pipes open, or write gigabytes. So every child
//! starts a new process group; when it exits or times out the whole group is killed; its output
//! is drained by threads that keep only a bounded head and tail; and no wait is without a
//! deadline.

use std::collections::VecDeque;
use std::io::Read;
use std::process::{Child, Command, ExitStatus};
use std::sync::mpsc::{self, Receiver};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use super::sys::{self, Limits};

/// A running child in its own process group. Dropping it kills the group.
#[derive(Debug)]
pub struct Proc {
    child: Child,
    status: Option<ExitStatus>,
}

impl Proc {
    /// Starts `cmd` in a new process group with `limits`.
    pub fn spawn(mut cmd: Command, limits: Limits) -> std::io::Result<Proc> {
        sys::confine(&mut cmd, limits);
        Ok(Proc { child: cmd.spawn()?, status: None })
    }

    pub fn child(&mut self) -> &mut Child {
        &mut self.child
    }

    /// The exit status if the child has exited by `deadline`, else `None` (it keeps running).
    /// Once the child exits, the rest of its group is killed. Polls with growing naps (50 µs to
    /// 5 ms): callers usually know the child is about to exit (its output ended).
    pub fn wait_until(&mut self, deadline: Instant) -> Option<ExitStatus> {
        if self.status.is_some() {
            return self.status;
        }
        let mut nap = Duration::from_micros(50);
        loop {
            if sys::has_exited(self.child.id(), false) {
                return Some(self.reap());
            }
            let now = Instant::now();
            if now >= deadline {
                return None;
            }
            std::thread::sleep(nap.min(deadline - now));
            nap = (nap * 2).min(Duration::from_millis(5));
        }
    }

    /// The exit status if the child has already exited.
    pub fn try_status(&mut self) -> Option<ExitStatus> {
        self.wait_until(Instant::now())
    }

    /// Kills the whole group and returns the child's status.
    pub fn kill(&mut self) -> ExitStatus {
        if let Some(s) = self.status {
            return s;
        }
        sys::kill_group(self.child.id());
        sys::has_exited(self.child.id(), true);
        self.reap()
    }

    fn reap(&mut self) -> ExitStatus {
        // The child is a zombie now, so its id still names its group: kill what it left behind.
        sys::kill_group(self.child.id());
        let status = self.child.wait().unwrap_or_else(|_| std::os::unix::process::ExitStatusExt::from_raw(0));
        self.status = Some(status);
        status
    }
}

impl Drop for Proc {
    fn drop(&mut self) {
        self.kill();
    }
}

/// Bytes kept from an output stream: the first and the last bytes up to a limit each, and the
/// total length.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Captured {
    pub head: Vec<u8>,
    pub tail: Vec<u8>,
    /// Bytes seen in all.
    pub total: u64,
}

impl Captured {
    /// True when bytes between head and tail were dropped.
    pub fn truncated(&self) -> bool {
        self.total > (self.head.len() + self.tail.len()) as u64
    }

    /// Head and tail joined, with a marker where bytes were dropped.
    pub fn bytes(&self) -> Vec<u8> {
        let mut out = self.head.clone();
        if self.truncated() {
            let dropped = self.total - (self.head.len() + self.tail.len()) as u64;
            out.extend_from_slice(format!("\n[… {dropped} bytes not kept …]\n").as_bytes());
        }
        out.extend_from_slice(&self.tail);
        out
    }

    pub fn is_empty(&self) -> bool {
        self.total == 0
    }
}

/// Accumulates a stream into head and tail of at most `limit` bytes each.
#[derive(Debug, Clone)]
pub struct Bounded {
    limit: usize,
    head: Vec<u8>,
    tail: VecDeque<u8>,
    total: u64,
}

impl Bounded {
    pub fn new(limit: usize) -> Bounded {
        Bounded { limit, head: Vec::new(), tail: VecDeque::new(), total: 0 }
    }

    pub fn push(&mut self, mut bytes: &[u8]) {
        self.total += bytes.len() as u64;
        let room = self.limit.saturating_sub(self.head.len());
        let take = room.min(bytes.len());
        self.head.extend_from_slice(&bytes[..take]);
        bytes = &bytes[take..];
        if bytes.len() >= self.limit {
            self.tail.clear();
            self.tail.extend(&bytes[bytes.len() - self.limit..]);
            return;
        }
        let overflow = (self.tail.len() + bytes.len()).saturating_sub(self.limit);
        self.tail.drain(..overflow);
        self.tail.extend(bytes);
    }

    pub fn clear(&mut self) {
        self.head.clear();
        self.tail.clear();
        self.total = 0;
    }

    pub fn captured(&self) -> Captured {
        Captured { head: self.head.clone(), tail: self.tail.iter().copied().collect(), total: self.total }
    }
}

/// A thread draining a stream into a shared [`Bounded`] buffer.
#[derive(Debug)]
pub struct Collector {
    shared: Arc<Mutex<Bounded>>,
    done: Receiver<()>,
}

impl Collector {
    /// Starts draining `reader`, keeping at most `limit` bytes of head and of tail.
    pub fn start(mut reader: impl Read + Send + 'static, limit: usize) -> Collector {
        let shared = Arc::new(Mutex::new(Bounded::new(limit)));
        let (tx, done) = mpsc::channel();
        let sink = Arc::clone(&shared);
        std::thread::spawn(move || {
            let mut buf = vec![0u8; 16 * 1024];
            loop {
                match reader.read(&mut buf) {
                    Ok(0) => break,
                    Ok(n) => sink.lock().unwrap_or_else(|e| e.into_inner()).push(&buf[..n]),
                    Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
                    Err(_) => break,
                }
            }
            let _ = tx.send(());
        });
        Collector { shared, done }
    }

    /// Waits for the end of the stream until `deadline` (a process that escaped its group may
    /// hold the pipe open), then returns what was kept.
    pub fn finish(&self, deadline: Instant) -> Captured {
        self.wait_end(deadline);
        self.snapshot()
    }

    /// Waits until the stream ends or `deadline`; true if it ended.
    pub fn wait_end(&self, deadline: Instant) -> bool {
        let left = deadline.saturating_duration_since(Instant::now());
        !matches!(self.done.recv_timeout(left), Err(mpsc::RecvTimeoutError::Timeout))
    }

    /// What was kept so far.
    pub fn snapshot(&self) -> Captured {
        self.shared.lock().unwrap_or_else(|e| e.into_inner()).captured()
    }

    /// Forgets what was kept so far (a long-running server's output from earlier runs).
    pub fn clear(&self) {
        self.shared.lock().unwrap_or_else(|e| e.into_inner()).clear();
    }
}

/// A thread forwarding a stream in chunks over a bounded channel (for replies read message by
/// message). The channel closes at the end of the stream; dropping the receiver stops the thread.
pub fn stream(mut reader: impl Read + Send + 'static) -> Receiver<Vec<u8>> {
    let (tx, rx) = mpsc::sync_channel::<Vec<u8>>(64);
    std::thread::spawn(move || {
        let mut buf = vec![0u8; 16 * 1024];
        loop {
            match reader.read(&mut buf) {
                Ok(0) => break,
                Ok(n) => {
                    if tx.send(buf[..n].to_vec()).is_err() {
                        break;
                    }
                }
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
                Err(_) => break,
            }
        }
    });
    rx
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bounded_keeps_head_and_tail() {
        let mut b = Bounded::new(4);
        b.push(b"abcdefg");
        b.push(b"hij");
        let c = b.captured();
        assert_eq!((c.head.as_slice(), c.tail.as_slice(), c.total), (&b"abcd"[..], &b"ghij"[..], 10));
        assert!(c.truncated());
        let mut small = Bounded::new(8);
        small.push(b"abc");
        assert_eq!(small.captured().bytes(), b"abc");
        let mut big = Bounded::new(2);
        big.push(&[7u8; 1000]);
        assert_eq!(big.captured().bytes().len(), 4 + "\n[… 996 bytes not kept …]\n".len());
    }

    #[test]
    fn waits_with_deadline_and_kills_the_group() {
        let mut cmd = Command::new("sh");
        // The child forks a sleeper that would keep running after the shell exits.
        cmd.args(["-c", "sleep 30 & sleep 30"]);
        let mut p = Proc::spawn(cmd, Limits::default()).unwrap();
        let start = Instant::now();
        assert!(p.wait_until(start + std::time::Duration::from_millis(50)).is_none());
        let status = p.kill();
        assert!(!status.success());
        assert!(start.elapsed() < std::time::Duration::from_secs(5));
    }
}
