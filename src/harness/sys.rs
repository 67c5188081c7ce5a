//! The only `unsafe` code of tracewalk: calls into the C library for what std does not offer.
//!
//! - killing a whole process group (a target and everything it forked),
//! - waiting for a child's exit without reaping it, so its process id (and so its group id)
//!   cannot be reused before the group is killed,
//! - resource limits set in the child between fork and exec,
//! - a SIGINT/SIGTERM handler that only raises a flag,
//! - the default action for SIGPIPE in commands that only print (so `tracewalk show | head`
//!   ends quietly, as Unix filters do).
//!
//! Each function states why its use of `unsafe` is sound.

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, OnceLock};

/// Sends SIGKILL to every process of group `pgid`. Errors (no such group) are ignored: the
/// group may already be gone.
pub fn kill_group(pgid: u32) {
    let Ok(pgid) = libc::pid_t::try_from(pgid) else { return };
    if pgid <= 1 {
        return; // never signal our own group or every process
    }
    // SAFETY: kill(2) with a negative pid signals a process group; it reads no memory of ours.
    unsafe {
        libc::kill(-pgid, libc::SIGKILL);
    }
}

/// Whether child `pid` has exited, leaving it a zombie (not reaped): its process id stays
/// reserved until `Child::wait` reaps it, so killing its group afterwards is safe. With `block`,
/// waits until it exits. A pid that is not (or no longer) our child counts as exited.
pub fn has_exited(pid: u32, block: bool) -> bool {
    // id_t is the unsigned type of process ids: a u32 pid always fits.
    let pid = pid as libc::id_t;
    let flags = libc::WEXITED | libc::WNOWAIT | if block { 0 } else { libc::WNOHANG };
    loop {
        // SAFETY: waitid(2) writes only into `info`, a zeroed siginfo_t we own; si_pid reads the
        // field waitid filled (it stays 0 when WNOHANG found no exited child).
        let (rc, exited_pid) = unsafe {
            let mut info: libc::siginfo_t = std::mem::zeroed();
            let rc = libc::waitid(libc::P_PID, pid, &mut info, flags);
            (rc, info.si_pid())
        };
        if rc == 0 {
            return exited_pid != 0;
        }
        if std::io::Error::last_os_error().raw_os_error() != Some(libc::EINTR) {
            return true;
        }
    }
}

/// Limits applied in a child before it runs the target program.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct Limits {
    /// Address-space limit in bytes (RLIMIT_AS).
    pub memory_bytes: Option<u64>,
}

/// Applies `limits` to the calling process. Called between fork and exec, so it uses only
/// setrlimit(2), which is async-signal-safe.
pub fn apply_limits(limits: Limits) -> std::io::Result<()> {
    if let Some(bytes) = limits.memory_bytes {
        set_limit(libc::RLIMIT_AS, bytes)?;
    }
    Ok(())
}

/// Turns off core dumps for this process and so for every target it starts (a crashing target
/// would otherwise write one per run).
pub fn no_core_dumps() {
    let _ = set_limit(libc::RLIMIT_CORE, 0);
}

#[cfg(target_os = "linux")]
type Resource = libc::__rlimit_resource_t;
#[cfg(not(target_os = "linux"))]
type Resource = libc::c_int;

fn set_limit(resource: Resource, value: u64) -> std::io::Result<()> {
    let value = value as libc::rlim_t;
    let limit = libc::rlimit { rlim_cur: value, rlim_max: value };
    // SAFETY: setrlimit(2) reads the struct we pass by reference and nothing else.
    if unsafe { libc::setrlimit(resource, &limit) } == 0 {
        Ok(())
    } else {
        Err(std::io::Error::last_os_error())
    }
}

static INTERRUPTED: OnceLock<Arc<AtomicBool>> = OnceLock::new();

extern "C" fn raise_flag(_signal: libc::c_int) {
    // An initialised OnceLock read and an atomic store: no allocation, no lock; safe in a handler.
    if let Some(flag) = INTERRUPTED.get() {
        flag.store(true, Ordering::SeqCst);
    }
}

/// Installs a handler for SIGINT and SIGTERM that raises the returned flag. The handler resets
/// itself after the first signal, so a second Ctrl-C ends the process at once.
pub fn interrupt_flag() -> Arc<AtomicBool> {
    let flag = Arc::clone(INTERRUPTED.get_or_init(|| Arc::new(AtomicBool::new(false))));
    for signal in [libc::SIGINT, libc::SIGTERM] {
        // SAFETY: sigaction(2) with a zeroed struct holding a valid handler address, an empty
        // mask and flags; `raise_flag` is async-signal-safe and lives for the whole program.
        unsafe {
            let mut action: libc::sigaction = std::mem::zeroed();
            action.sa_sigaction = raise_flag as extern "C" fn(libc::c_int) as libc::sighandler_t;
            action.sa_flags = libc::SA_RESETHAND | libc::SA_RESTART;
            libc::sigemptyset(&mut action.sa_mask);
            libc::sigaction(signal, &action, std::ptr::null_mut());
        }
    }
    flag
}

/// The name of a signal number (SIGSEGV, …), or `signal N`.
pub fn signal_name(signal: i32) -> String {
    let name = match signal {
        libc::SIGHUP => "SIGHUP",
        libc::SIGINT => "SIGINT",
        libc::SIGQUIT => "SIGQUIT",
        libc::SIGILL => "SIGILL",
        libc::SIGTRAP => "SIGTRAP",
        libc::SIGABRT => "SIGABRT",
        libc::SIGBUS => "SIGBUS",
        libc::SIGFPE => "SIGFPE",
        libc::SIGKILL => "SIGKILL",
        libc::SIGSEGV => "SIGSEGV",
        libc::SIGPIPE => "SIGPIPE",
        libc::SIGALRM => "SIGALRM",
        libc::SIGTERM => "SIGTERM",
        libc::SIGXCPU => "SIGXCPU",
        libc::SIGXFSZ => "SIGXFSZ",
        libc::SIGSYS => "SIGSYS",
        _ => return format!("signal {signal}"),
    };
    name.to_string()
}

/// Makes `cmd` start its child in a new process group (whose id is the child's pid) with
/// `limits` applied, so the whole group can be killed and no limit leaks into tracewalk.
/// Without limits no code runs between fork and exec, which lets std use posix_spawn (much
/// faster than fork for each run).
pub fn confine(cmd: &mut std::process::Command, limits: Limits) {
    use std::os::unix::process::CommandExt;
    cmd.process_group(0);
    if limits == Limits::default() {
        return;
    }
    // SAFETY: the closure runs between fork and exec and only calls setrlimit(2), which is
    // async-signal-safe; it allocates nothing and touches no lock.
    unsafe {
        cmd.pre_exec(move || apply_limits(limits));
    }
}

/// Restores the default action of SIGPIPE (terminate) that Rust's runtime replaces by "ignore".
/// Only for commands that write to nothing but their own standard output and files: a command
/// that drives a target must keep SIGPIPE ignored, or a target closing its end of a pipe would
/// kill tracewalk instead of failing one write.
pub fn default_sigpipe() {
    // SAFETY: signal(2) with SIG_DFL installs no handler of ours; it reads no memory of ours.
    unsafe {
        libc::signal(libc::SIGPIPE, libc::SIG_DFL);
    }
}
