//! A simulated Heronlight lighting hub (the invented HLP line protocol of
//! `corpora/lamp-control`), reading one client session on stdin and answering on stdout.
//! A demo target for `tracewalk hunt`: small, deterministic, std only, and with three
//! planted bugs that only rare but plausible sessions reach. None of the 450 sessions of the
//! corpus triggers them.
//!
//! 1. An uncommon order of four requests: `SUB` a zone, `SCENE SAVE`, `UNSUB` that zone, then
//!    `FADE`. The scene remembers how many subscribers watched it; the fade notifies that many
//!    from a list that has since shrunk (index out of bounds).
//!    Minimal session: HELLO, AUTH, SUB, SCENE SAVE, UNSUB, FADE (6 messages).
//! 2. A transition never seen in training: `LIST ZONES` after a `FADE` (clients list zones only
//!    right after logging in). The listing looks up the running fade by zone number instead of
//!    by its place in the fade list (index out of bounds).
//!    Minimal session: HELLO, AUTH, FADE, LIST ZONES (4 messages).
//! 3. A slot value at a boundary: a negative level in `SET` or `FADE` while any client is
//!    subscribed. Levels are checked against 100 but not against 0, and the event feed looks
//!    the level up in the brightness curve (index out of bounds).
//!    Minimal session: HELLO, AUTH, SUB, SET with level -1 (4 messages).
//!
//! Build: `rustc --edition 2024 -O examples/lamp_hub.rs -o lamp_hub` (or `cargo build
//! --example lamp_hub`). Run: `printf 'HELLO cli 2.1\nPING\n' | ./lamp_hub`.

use std::io::{self, BufRead, Write};

const ZONES: usize = 16;

struct Fade {
    zone: usize,
    level: i64,
}

struct Scene {
    id: u32,
    levels: [i64; ZONES],
    /// Subscribers when the scene was saved.
    watchers: usize,
}

struct Hub {
    greeted: bool,
    authed: bool,
    levels: [i64; ZONES],
    subs: Vec<usize>,
    fades: Vec<Fade>,
    scenes: Vec<Scene>,
    next_scene: u32,
    /// Perceived brightness (0..=255) of each level 0..=100.
    curve: Vec<u8>,
}

/// Value of `key=` in the words of a command.
fn arg<'a>(words: &[&'a str], key: &str) -> Option<&'a str> {
    words.iter().find_map(|w| w.strip_prefix(key).and_then(|r| r.strip_prefix('=')))
}

impl Hub {
    fn new() -> Hub {
        Hub {
            greeted: false,
            authed: false,
            levels: [0; ZONES],
            subs: Vec::new(),
            fades: Vec::new(),
            scenes: Vec::new(),
            next_scene: 1,
            curve: (0..=100).map(|l| ((l as f64 / 100.0).powf(2.2) * 255.0).round() as u8).collect(),
        }
    }

    /// Zone number 1..=16 from `zone=`, or the error reply.
    fn zone(words: &[&str]) -> Result<usize, String> {
        let text = arg(words, "zone").ok_or("ERR 400 missing zone")?;
        let n: i64 = text.parse().map_err(|_| format!("ERR 400 bad zone={text}"))?;
        if n < 1 || n > ZONES as i64 { Err("ERR 400 zone out of range".into()) } else { Ok(n as usize) }
    }

    /// Level from `level=`, or the error reply.
    fn level(words: &[&str]) -> Result<i64, String> {
        let text = arg(words, "level").ok_or("ERR 400 missing level")?;
        let level: i64 = text.parse().map_err(|_| format!("ERR 400 bad level={text}"))?;
        // Planted bug 3: only the upper end of the range is checked.
        if level > 100 { Err("ERR 400 level out of range".into()) } else { Ok(level) }
    }

    /// Events for a level change of `zone` to `level`.
    fn changed(&self, zone: usize, level: i64, src: &str, out: &mut String) {
        if self.subs.is_empty() {
            return;
        }
        // The event feed carries perceived brightness (planted bug 3 reaches here with level < 0).
        let perceived = self.curve[level as usize];
        if self.subs.contains(&zone) {
            out.push_str(&format!("EVT zone={zone} level={level} perceived={perceived} src={src}\n"));
        }
    }

    /// Handles one command line; returns the reply lines and whether the session ends.
    fn handle(&mut self, line: &str) -> (String, bool) {
        let words: Vec<&str> = line.split(' ').filter(|w| !w.is_empty()).collect();
        let mut out = String::new();
        let verb = words.first().copied().unwrap_or("");
        match verb {
            "HELLO" => match words.get(2) {
                Some(&proto) if proto.starts_with("2.") => {
                    self.greeted = true;
                    out.push_str(&format!("OK HELLO hub=heron-h16-demo proto=2.1 zones={ZONES}\n"));
                }
                Some(_) => out.push_str("ERR 505 proto unsupported min=2.0\n"),
                None => out.push_str("ERR 400 bad hello\n"),
            },
            "PING" => out.push_str("OK PONG\n"),
            "BYE" => return ("OK BYE\n".into(), true),
            _ if !self.greeted => out.push_str("ERR 400 hello first\n"),
            "AUTH" => match words.get(1) {
                Some(t) if t.len() == 32 && t.bytes().all(|b| b.is_ascii_hexdigit()) => {
                    self.authed = true;
                    out.push_str("OK AUTH role=admin\n");
                }
                _ => out.push_str("ERR 401 bad token\n"),
            },
            _ if !self.authed => out.push_str("ERR 401 auth required\n"),
            _ => match self.command(verb, &words, line, &mut out) {
                Ok(()) => {}
                Err(e) => {
                    out.clear();
                    out.push_str(&e);
                    out.push('\n');
                }
            },
        }
        (out, false)
    }

    fn command(&mut self, verb: &str, words: &[&str], line: &str, out: &mut String) -> Result<(), String> {
        match (verb, words.get(1).copied()) {
            ("LIST", Some("ZONES")) => {
                for n in 1..=ZONES {
                    let level = match self.fades.iter().position(|f| f.zone == n) {
                        // Planted bug 2: indexes the fade list by zone number.
                        Some(_) => self.fades[n].level,
                        None => self.levels[n - 1],
                    };
                    out.push_str(&format!("VAL zone={n} name=\"Zone {n}\" level={level}\n"));
                }
                out.push_str(&format!("OK ZONES count={ZONES}\n"));
            }
            ("SUB", _) => {
                let zone = Hub::zone(words)?;
                if self.subs.contains(&zone) {
                    out.push_str(&format!("OK SUB zone={zone} already\n"));
                } else {
                    self.subs.push(zone);
                    out.push_str(&format!("OK SUB zone={zone}\n"));
                }
            }
            ("UNSUB", _) => {
                let zone = Hub::zone(words)?;
                let at = self
                    .subs
                    .iter()
                    .position(|&z| z == zone)
                    .ok_or(format!("ERR 409 not subscribed zone={zone}"))?;
                self.subs.remove(at);
                out.push_str(&format!("OK UNSUB zone={zone}\n"));
            }
            ("SET", _) => {
                let zone = Hub::zone(words)?;
                let level = Hub::level(words)?;
                self.fades.retain(|f| f.zone != zone);
                self.levels[zone - 1] = level;
                out.push_str(&format!("OK SET zone={zone} level={level}\n"));
                self.changed(zone, level, "self", out);
            }
            ("FADE", _) => {
                let zone = Hub::zone(words)?;
                let level = Hub::level(words)?;
                let ms_text = arg(words, "ms").ok_or("ERR 400 missing ms")?;
                let ms: u32 = ms_text.parse().map_err(|_| format!("ERR 400 bad ms={ms_text}"))?;
                if let Some(scene) = self.scenes.last() {
                    for i in 0..scene.watchers {
                        // Planted bug 1: `watchers` was counted when the scene was saved; an
                        // UNSUB since then made the list shorter.
                        let watcher = self.subs[i];
                        out.push_str(&format!("EVT scene={} zone={watcher} src=fade\n", scene.id));
                    }
                }
                self.fades.retain(|f| f.zone != zone);
                self.fades.push(Fade { zone, level });
                self.levels[zone - 1] = level;
                out.push_str(&format!("OK FADE zone={zone} level={level} ms={ms}\n"));
                self.changed(zone, level, "fade", out);
            }
            ("GET", _) => {
                let zone = Hub::zone(words)?;
                out.push_str(&format!("VAL zone={zone} level={}\n", self.levels[zone - 1]));
            }
            ("SCENE", Some("SAVE")) => {
                let name = line.split_once("name=\"").map(|(_, rest)| rest).ok_or("ERR 400 missing name")?;
                if !name.ends_with('"') || name.len() < 2 {
                    return Err("ERR 400 bad name".into());
                }
                let id = self.next_scene;
                self.next_scene += 1;
                self.scenes.push(Scene { id, levels: self.levels, watchers: self.subs.len() });
                out.push_str(&format!("OK scene id={id}\n"));
            }
            ("SCENE", Some("RECALL")) => {
                let text = arg(words, "id").ok_or("ERR 400 missing id")?;
                let id: u32 = text.parse().map_err(|_| format!("ERR 400 bad id={text}"))?;
                let scene =
                    self.scenes.iter().find(|s| s.id == id).ok_or(format!("ERR 404 no scene id={id}"))?;
                let levels = scene.levels;
                self.levels = levels;
                self.fades.clear();
                out.push_str(&format!("OK RECALL id={id}\n"));
                for zone in 1..=ZONES {
                    if self.subs.contains(&zone) {
                        out.push_str(&format!("EVT zone={zone} level={} src=scene\n", levels[zone - 1]));
                    }
                }
            }
            _ => return Err("ERR 400 unknown command".into()),
        }
        Ok(())
    }
}

/// Serves one client session: command lines from `input`, replies to `output`, until the input
/// ends or the client says BYE. `main` runs it over stdin and stdout; the fuzz targets
/// `lamp_hub_*` include this file and run it in-process.
pub fn serve(mut input: impl BufRead, mut out: impl Write) {
    let mut hub = Hub::new();
    let mut raw = Vec::new();
    loop {
        raw.clear();
        match input.read_until(b'\n', &mut raw) {
            Ok(0) | Err(_) => return,
            Ok(_) => {}
        }
        let line = String::from_utf8_lossy(&raw);
        let line = line.trim_end_matches(['\n', '\r']);
        let (reply, end) = hub.handle(line);
        if out.write_all(reply.as_bytes()).and_then(|_| out.flush()).is_err() || end {
            return;
        }
    }
}

fn main() {
    serve(io::stdin().lock(), io::stdout().lock());
}
