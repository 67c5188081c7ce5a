//! A target that misbehaves on purpose, for tests/faults.rs (std only, built with plain rustc).
//!
//! misbehave crash-always            reads stdin, then aborts (SIGABRT) whatever it got
//! misbehave quiet-fail WORD         exits 0, but writes an error line to stderr when a line of
//!                                   stdin starts with WORD
//! misbehave flaky                   exits 3 with an error line about one run in ten, at random
//!                                   (a byte of /dev/urandom), whatever the input
//! misbehave record DIR FILE         writes its argv and the mode of FILE to DIR/<pid>.argv,
//!                                   FILE's bytes to DIR/<pid>.bytes; exits 1 when the bytes
//!                                   hold `touch` (so hostile payloads become findings)
//! misbehave cut-reply PORT          HTTP server on 127.0.0.1:PORT that answers every request
//!                                   with half a response, then closes the connection
//! misbehave no-accept PORT          listens on 127.0.0.1:PORT with the smallest backlog and
//!                                   never accepts a connection
//!
//! With FAULTS_PIDS=DIR in the environment, every process writes its pid to DIR/<pid>.pid
//! first, so a test can check that none is left alive.

use std::io::{Read, Write};
use std::net::{TcpListener, TcpStream};
use std::os::unix::fs::PermissionsExt;
use std::time::Duration;

fn stdin_bytes() -> Vec<u8> {
    let mut input = Vec::new();
    let _ = std::io::stdin().read_to_end(&mut input);
    input
}

fn listener(port: &str) -> TcpListener {
    TcpListener::bind(format!("127.0.0.1:{port}")).expect("bind")
}

fn read_head(stream: &mut TcpStream) -> bool {
    let mut seen = Vec::new();
    let mut buf = [0u8; 4096];
    while !seen.windows(4).any(|w| w == b"\r\n\r\n") {
        match stream.read(&mut buf) {
            Ok(0) | Err(_) => return false,
            Ok(n) => seen.extend_from_slice(&buf[..n]),
        }
    }
    true
}

mod sys {
    unsafe extern "C" {
        fn listen(fd: i32, backlog: i32) -> i32;
    }

    /// Sets the accept queue of a listening socket to its smallest length.
    pub fn smallest_backlog(fd: i32) {
        // SAFETY: `fd` is a listening socket owned by a live TcpListener; listen(2) on it only
        // changes its backlog.
        let r = unsafe { listen(fd, 0) };
        assert_eq!(r, 0, "listen");
    }
}

fn main() {
    if let Some(dir) = std::env::var_os("FAULTS_PIDS") {
        let pid = std::process::id();
        std::fs::write(std::path::Path::new(&dir).join(format!("{pid}.pid")), pid.to_string()).unwrap();
    }
    let args: Vec<String> = std::env::args().collect();
    match args.get(1).map(String::as_str) {
        Some("crash-always") => {
            stdin_bytes();
            eprintln!("fatal: the lamp table is gone");
            std::process::abort();
        }
        Some("quiet-fail") => {
            let input = stdin_bytes();
            let word = args[2].as_bytes();
            if input.split(|&b| b == b'\n').any(|l| l.starts_with(word)) {
                eprintln!("ERROR: zone table corrupted after {}", args[2]);
            }
        }
        Some("flaky") => {
            stdin_bytes();
            let mut byte = [0u8; 1];
            std::fs::File::open("/dev/urandom").unwrap().read_exact(&mut byte).unwrap();
            if byte[0] < 26 {
                eprintln!("error: lost a race with the dimmer thread");
                std::process::exit(3);
            }
        }
        Some("record") => {
            let dir = std::path::Path::new(&args[2]);
            let file = std::path::Path::new(&args[3]);
            let mode = std::fs::metadata(file).unwrap().permissions().mode() & 0o7777;
            let bytes = std::fs::read(file).unwrap();
            let pid = std::process::id();
            let mut record = args.join("\0");
            record.push_str(&format!("\0mode={mode:o}"));
            std::fs::write(dir.join(format!("{pid}.argv")), record).unwrap();
            std::fs::write(dir.join(format!("{pid}.bytes")), &bytes).unwrap();
            if bytes.windows(5).any(|w| w == b"touch") {
                eprintln!("error: payload seen");
                std::process::exit(1);
            }
        }
        Some("cut-reply") => {
            for stream in listener(&args[2]).incoming() {
                let Ok(mut stream) = stream else { continue };
                if read_head(&mut stream) {
                    let _ = stream.write_all(b"HTTP/1.1 200 OK\r\nContent-Length: 64\r\n\r\n{\"cart_id\":");
                }
                // Dropped here: the connection closes in the middle of the body.
            }
        }
        Some("no-accept") => {
            use std::os::fd::AsRawFd;
            let l = listener(&args[2]);
            sys::smallest_backlog(l.as_raw_fd());
            loop {
                std::thread::sleep(Duration::from_secs(60));
            }
        }
        _ => {
            eprintln!("usage: misbehave MODE ARGS");
            std::process::exit(64);
        }
    }
}
