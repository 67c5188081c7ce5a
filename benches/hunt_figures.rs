//! Figures for README's Hunting section: for each planted bug of the two demo targets, the runs
//! a campaign needs to first find it, per generation mode (plausible, rare, frontier), beside
//! two baselines run the same way in the same process: uniformly random token sequences from
//! the model's vocabulary, and random byte mutation of corpus sessions. Medians over several
//! seeds; shrunk trace lengths beside the planted minimal lengths.
//!
//! ```text
//! cargo bench --bench hunt_figures -- [--seeds 5] [--budget 10000] [--baseline-budget 100000]
//!     [--jobs 2] [--only lamp_hub|shop_server] [--arms rare,frontier,...]
//! ```
//!
//! Model arms play sessions as `tracewalk hunt` does: live (copied values taken from the
//! target's replies) when the model learned value flow and the target replies per message.
//! A campaign stops at its budget or as soon as it has found every planted bug of its target.
//! A bug a campaign never found counts as found after infinitely many runs, so a median is
//! finite only when more than half the seeds found it; ratios against a baseline that never
//! found a bug are lower bounds (its budget over our median).

use std::collections::{BTreeMap, HashSet};
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

use rand::{Rng, RngExt};
use tracewalk::generate::{GenOptions, Generator, Mode, fill_values, trace_rng};
use tracewalk::harness::{CommandLine, ReplyFraming, Target, TargetKind, TargetSpec, Timing};
use tracewalk::hunt::{self, Finding, HuntOptions, ModelSource, Observer, Resume, TraceSource};
use tracewalk::model::{Compiled, LearnOptions};
use tracewalk::read::{self, Role};
use tracewalk::shrink::ShrinkOptions;
use tracewalk::symbol::{FIRST_TOKEN, NOVEL};
use tracewalk::token::render::Skew;
use tracewalk::trace::{Trace, TraceMessage};

/// Fixed salt so baseline streams differ from the model's for the same seed.
const BASELINE_SALT: u64 = 0x6A09_E667_F3BC_C908;

#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
enum Arm {
    Plausible,
    Rare,
    Frontier,
    RandomTokens,
    ByteMutation,
}

impl Arm {
    const ALL: [Arm; 5] = [Arm::Plausible, Arm::Rare, Arm::Frontier, Arm::RandomTokens, Arm::ByteMutation];

    fn name(self) -> &'static str {
        match self {
            Arm::Plausible => "plausible",
            Arm::Rare => "rare",
            Arm::Frontier => "frontier",
            Arm::RandomTokens => "random tokens",
            Arm::ByteMutation => "byte mutation",
        }
    }

    fn mode(self) -> Option<Mode> {
        match self {
            Arm::Plausible => Some(Mode::Plausible),
            Arm::Rare => Some(Mode::Rare),
            Arm::Frontier => Some(Mode::Frontier),
            _ => None,
        }
    }
}

/// Uniformly random token sequences over the model's vocabulary: message counts and lengths
/// uniform up to twice the corpus means, every token equally likely, slots filled from pools.
struct RandomTokens<'m> {
    model: &'m Compiled,
    seed: u64,
    max_messages: u64,
    max_tokens: u64,
}

impl TraceSource for RandomTokens<'_> {
    fn trace(&mut self, index: u64) -> Trace {
        let mut rng = trace_rng(self.seed ^ BASELINE_SALT, index);
        let symbols = self.model.vocab.symbols();
        let n = rng.random_range(1..=self.max_messages);
        let messages = (0..n)
            .map(|_| {
                let len = rng.random_range(1..=self.max_tokens);
                let tokens: Vec<u32> = (0..len).map(|_| rng.random_range(FIRST_TOKEN..symbols)).collect();
                let values = fill_values(self.model, &tokens, NOVEL, &mut rng);
                let refs: Vec<&[u8]> = values.iter().map(Vec::as_slice).collect();
                TraceMessage::new(self.model.render(&tokens, &refs, Skew::default()))
            })
            .collect();
        Trace { header: vec![("baseline".into(), "random tokens".into())], messages }
    }

    fn identity(&self) -> Vec<(String, String)> {
        vec![("baseline".into(), "random tokens".into()), ("seed".into(), self.seed.to_string())]
    }
}

/// Random byte mutation of corpus sessions: a session drawn uniformly, then 1 to 8 edits, each
/// at a uniformly drawn byte of the session: flip a bit, set a random byte, insert a random
/// byte or delete the byte. Message boundaries stay where they were.
struct ByteMutation {
    sessions: Vec<Vec<Vec<u8>>>,
    seed: u64,
}

impl ByteMutation {
    fn mutate<R: Rng>(messages: &mut [Vec<u8>], rng: &mut R) {
        let total: usize = messages.iter().map(Vec::len).sum();
        if total == 0 {
            return;
        }
        let mut at = rng.random_range(0..total);
        let m = messages.iter().position(|m| {
            if at < m.len() {
                true
            } else {
                at -= m.len();
                false
            }
        });
        let Some(m) = m else { return };
        let message = &mut messages[m];
        match rng.random_range(0..4u8) {
            0 => message[at] ^= 1 << rng.random_range(0..8u32),
            1 => message[at] = rng.random::<u8>(),
            2 => message.insert(at, rng.random::<u8>()),
            _ => {
                message.remove(at);
            }
        }
    }
}

impl TraceSource for ByteMutation {
    fn trace(&mut self, index: u64) -> Trace {
        let mut rng = trace_rng(self.seed ^ BASELINE_SALT.rotate_left(17), index);
        let mut messages = self.sessions[rng.random_range(0..self.sessions.len())].clone();
        for _ in 0..rng.random_range(1..=8u32) {
            ByteMutation::mutate(&mut messages, &mut rng);
        }
        Trace {
            header: vec![("baseline".into(), "byte mutation".into())],
            messages: messages.into_iter().map(TraceMessage::new).collect(),
        }
    }

    fn identity(&self) -> Vec<(String, String)> {
        vec![("baseline".into(), "byte mutation".into()), ("seed".into(), self.seed.to_string())]
    }
}

/// Raises the stop flag once every wanted signature was found.
struct UntilAllFound {
    wanted: HashSet<String>,
    found: HashSet<String>,
    stop: Arc<AtomicBool>,
}

impl Observer for UntilAllFound {
    fn found(&mut self, f: &Finding) {
        if self.wanted.contains(&f.signature()) {
            self.found.insert(f.signature());
        }
        if self.found.len() == self.wanted.len() {
            self.stop.store(true, Ordering::Relaxed);
        }
    }
}

struct Options {
    seeds: u64,
    budget: u64,
    baseline_budget: u64,
    jobs: usize,
    /// Only this target (lamp_hub or shop_server).
    only: Option<String>,
    /// Only these arms (names as printed, spaces as dashes); cells of the others print "—".
    arms: Option<Vec<String>>,
}

fn parse_options() -> Options {
    let mut o =
        Options { seeds: 5, budget: 10_000, baseline_budget: 100_000, jobs: 2, only: None, arms: None };
    let args: Vec<String> = std::env::args().skip(1).collect();
    let mut i = 0;
    while i < args.len() {
        let value = |i: usize| -> u64 {
            args.get(i + 1)
                .and_then(|v| v.parse().ok())
                .unwrap_or_else(|| panic!("{} needs a number", args[i]))
        };
        match args[i].as_str() {
            "--seeds" => o.seeds = value(i),
            "--budget" => o.budget = value(i),
            "--baseline-budget" => o.baseline_budget = value(i),
            "--jobs" => o.jobs = value(i) as usize,
            "--only" => o.only = args.get(i + 1).cloned(),
            "--arms" => o.arms = args.get(i + 1).map(|a| a.split(',').map(str::to_string).collect()),
            // cargo bench passes --bench; anything else is a mistake worth knowing about.
            "--bench" => {
                i += 1;
                continue;
            }
            other => panic!("unknown option {other}"),
        }
        i += 2;
    }
    o
}

fn root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
}

/// Builds a demo target with rustc (std only) into the target directory.
fn build_demo(name: &str) -> PathBuf {
    let dir = PathBuf::from(
        std::env::var("CARGO_TARGET_DIR").unwrap_or_else(|_| root().join("target").display().to_string()),
    )
    .join("hunt-figures");
    std::fs::create_dir_all(&dir).unwrap();
    let out = dir.join(name);
    let status = std::process::Command::new("rustc")
        .current_dir(root())
        .args(["--edition", "2024", "-O", "-o"])
        .arg(&out)
        .arg(format!("examples/{name}.rs"))
        .status()
        .expect("rustc runs");
    assert!(status.success(), "building {name}");
    out
}

fn learn(corpus: &str) -> (Compiled, Vec<Vec<Vec<u8>>>) {
    let path = root().join("corpora").join(corpus);
    let options = read::options_from_manifests(std::slice::from_ref(&path)).unwrap();
    let corpus = read::read_paths(&[path], &options).unwrap();
    let (model, _) = tracewalk::model::learn(&corpus, &LearnOptions::default(), None).unwrap();
    let sessions = corpus
        .sessions
        .iter()
        .map(|s| {
            s.frames.iter().filter(|f| f.role == Role::Request).map(|f| corpus.bytes(s, f).to_vec()).collect()
        })
        .collect();
    let hash = tracewalk::model::content_hash(&model);
    (Compiled::new(model, hash).unwrap(), sessions)
}

struct Subject {
    name: &'static str,
    model: Compiled,
    sessions: Vec<Vec<Vec<u8>>>,
    spec: TargetSpec,
    /// Planted bugs: (short name, signature, minimal messages).
    bugs: Vec<(String, String, usize)>,
}

fn subject(name: &'static str, corpus: &str, spec: TargetSpec, planted: &[&str]) -> Subject {
    let (model, sessions) = learn(corpus);
    let mut target = spec.build(0).unwrap();
    let bugs = planted
        .iter()
        .map(|p| {
            let text =
                std::fs::read_to_string(root().join("examples/planted").join(format!("{p}.trace"))).unwrap();
            let trace = Trace::parse(&text).unwrap();
            let messages: Vec<Vec<u8>> = trace.messages.iter().map(|m| m.bytes.clone()).collect();
            let failure =
                target.run(&messages).unwrap().failure.unwrap_or_else(|| panic!("{p} does not fail"));
            (p.to_string(), failure.signature(), messages.len())
        })
        .collect();
    Subject { name, model, sessions, spec, bugs }
}

/// First run per planted bug (None: not found) and shrunk lengths, for one campaign.
type Outcome = (BTreeMap<String, Option<u64>>, BTreeMap<String, usize>, Vec<String>, u64, Duration);

fn campaign(
    s: &Subject,
    arm: Arm,
    seed: u64,
    o: &Options,
    targets: &mut [Box<dyn Target + Send>],
) -> Outcome {
    let stop = Arc::new(AtomicBool::new(false));
    let wanted: HashSet<String> = s.bugs.iter().map(|b| b.1.clone()).collect();
    let mut observer = UntilAllFound { wanted, found: HashSet::new(), stop: stop.clone() };
    let budget = if arm.mode().is_some() { o.budget } else { o.baseline_budget };
    let options = HuntOptions {
        runs: Some(budget),
        time: None,
        shrink: arm.mode().map(|_| ShrinkOptions { max_calls: 2000, stop: None }),
        confirm: 1,
        stop: Some(stop),
        replay: None,
    };
    let start = Instant::now();
    let summary = match arm.mode() {
        Some(mode) => {
            let generator = Generator::new(&s.model, GenOptions { mode, ..GenOptions::default() }).unwrap();
            let live = !s.model.flow.is_empty() && targets[0].replies();
            let mut source = ModelSource::new(generator, seed).with_live_replies(live);
            hunt::hunt(&mut source, targets, None, Resume::default(), &options, &mut observer)
        }
        None if arm == Arm::RandomTokens => {
            let t = s.model.totals;
            let mut source = RandomTokens {
                model: &s.model,
                seed,
                max_messages: (2 * t.messages / t.sessions.max(1)).max(1),
                max_tokens: (2 * t.tokens / t.messages.max(1)).max(1),
            };
            hunt::hunt(&mut source, targets, None, Resume::default(), &options, &mut observer)
        }
        None => {
            let mut source = ByteMutation { sessions: s.sessions.clone(), seed };
            hunt::hunt(&mut source, targets, None, Resume::default(), &options, &mut observer)
        }
    }
    .unwrap();
    let mut first = BTreeMap::new();
    let mut shrunk = BTreeMap::new();
    let mut others = Vec::new();
    for (name, signature, _) in &s.bugs {
        let f = summary.findings.iter().find(|f| &f.signature() == signature);
        first.insert(name.clone(), f.map(|f| f.first_run));
        if let Some(t) = f.and_then(|f| f.shrunk.as_ref()) {
            shrunk.insert(name.clone(), t.wire_messages());
        }
    }
    for f in &summary.findings {
        if !s.bugs.iter().any(|b| b.1 == f.signature()) {
            others.push(f.signature());
        }
    }
    (first, shrunk, others, summary.progress.runs, start.elapsed())
}

/// The median of runs where a missing value is infinitely many runs.
fn median(values: &[Option<u64>]) -> Option<u64> {
    let mut v: Vec<u64> = values.iter().map(|x| x.unwrap_or(u64::MAX)).collect();
    v.sort_unstable();
    let m = if v.len() % 2 == 1 {
        v[v.len() / 2]
    } else {
        let (a, b) = (v[v.len() / 2 - 1], v[v.len() / 2]);
        if b == u64::MAX { u64::MAX } else { (a + b) / 2 }
    };
    (m != u64::MAX).then_some(m)
}

fn main() {
    let o = parse_options();
    let lamp_bin = build_demo("lamp_hub");
    let shop_bin = build_demo("shop_server");
    let quick = vec![("RUST_BACKTRACE".to_string(), "0".to_string())];
    let mut lamp_spec = TargetSpec::new(
        TargetKind::Exec {
            command: CommandLine::parse(&lamp_bin.display().to_string()).unwrap(),
            per_message: false,
        },
        ReplyFraming::Lines { end: None },
    );
    lamp_spec.env = quick.clone();
    // Loopback replies take well under a millisecond; a short reply timeout keeps campaigns
    // whose traffic desynchronises the HTTP stream (byte mutation) from idling. Same for all arms.
    let timing = Timing { reply_timeout: Duration::from_millis(50), ..Timing::default() };
    let mut shop_spec = TargetSpec::new(
        TargetKind::Tcp {
            // Below Linux's ephemeral range (32768–60999), so no client socket holds it.
            addr: "127.0.0.1:21620".parse().unwrap(),
            spawn: Some(CommandLine::parse(&format!("{} --port {{port}}", shop_bin.display())).unwrap()),
            start_timeout: Duration::from_secs(10),
        },
        ReplyFraming::Http,
    );
    shop_spec.env = quick;
    shop_spec.timing = timing;
    let wanted = |name: &str| o.only.as_deref().is_none_or(|only| only == name);
    let mut subjects = Vec::new();
    if wanted("lamp_hub") {
        subjects.push(subject(
            "lamp_hub",
            "lamp-control",
            lamp_spec,
            &["lamp-order", "lamp-transition", "lamp-boundary"],
        ));
    }
    if wanted("shop_server") {
        subjects.push(subject(
            "shop_server",
            "shop-api",
            shop_spec,
            &["shop-order", "shop-transition", "shop-boundary"],
        ));
    }
    println!(
        "hunt figures: {} seeds, modes up to {} runs, baselines up to {} runs, {} jobs",
        o.seeds, o.budget, o.baseline_budget, o.jobs
    );
    for s in &subjects {
        let mut targets: Vec<Box<dyn Target + Send>> =
            (0..o.jobs).map(|j| s.spec.build(j).unwrap()).collect();
        // arm → bug → first runs over seeds; bug → shrunk lengths.
        let mut firsts: BTreeMap<Arm, BTreeMap<String, Vec<Option<u64>>>> = BTreeMap::new();
        let mut shrunk: BTreeMap<String, Vec<usize>> = BTreeMap::new();
        let mut others: BTreeMap<String, usize> = BTreeMap::new();
        let chosen = |arm: Arm| {
            o.arms.as_ref().is_none_or(|a| a.iter().any(|n| n.as_str() == arm.name().replace(' ', "-")))
        };
        for arm in Arm::ALL.into_iter().filter(|&a| chosen(a)) {
            let mut runs = 0;
            let mut time = Duration::ZERO;
            for seed in 1..=o.seeds {
                let (first, lengths, other, n, t) = campaign(s, arm, seed, &o, &mut targets);
                eprintln!(
                    "  {} {} seed {seed}: {n} runs in {:.1} s; first runs {first:?}",
                    s.name,
                    arm.name(),
                    t.as_secs_f64()
                );
                runs += n;
                time += t;
                for (bug, run) in first {
                    firsts.entry(arm).or_default().entry(bug).or_default().push(run);
                }
                for (bug, len) in lengths {
                    if matches!(arm, Arm::Rare | Arm::Frontier) {
                        shrunk.entry(bug).or_default().push(len);
                    }
                }
                for sig in other {
                    *others.entry(format!("{}: {sig}", arm.name())).or_default() += 1;
                }
            }
            eprintln!("{} {}: {runs} runs in {:.1} s", s.name, arm.name(), time.as_secs_f64());
        }
        println!();
        println!("{} ({} model {}):", s.name, s.name, s.model.short_hash());
        println!();
        println!(
            "| planted bug | minimal | plausible | rare | frontier | random tokens | byte mutation | mutation ÷ best of rare, frontier | shrunk (rare, frontier) |"
        );
        println!("|---|---|---|---|---|---|---|---|---|");
        for (bug, _, minimal) in &s.bugs {
            let cell = |arm: Arm| -> (String, Option<u64>) {
                let Some(v) = firsts.get(&arm).and_then(|b| b.get(bug)) else { return ("—".into(), None) };
                let found = v.iter().filter(|x| x.is_some()).count();
                let budget = if arm.mode().is_some() { o.budget } else { o.baseline_budget };
                let m = median(v);
                let text = match m {
                    Some(m) => format!("{m} ({found}/{})", v.len()),
                    None => format!("> {budget} ({found}/{})", v.len()),
                };
                (text, m)
            };
            let (rare, rare_m) = cell(Arm::Rare);
            let (frontier, frontier_m) = cell(Arm::Frontier);
            let (mutation, mutation_m) = cell(Arm::ByteMutation);
            let best = [rare_m, frontier_m].into_iter().flatten().min();
            let ratio = match (best, mutation_m) {
                _ if !firsts.contains_key(&Arm::ByteMutation) => "—".to_string(),
                (Some(b), Some(m)) => format!("{:.0}×", m as f64 / b.max(1) as f64),
                (Some(b), None) => format!("≥ {:.0}×", o.baseline_budget as f64 / b.max(1) as f64),
                (None, _) => "—".to_string(),
            };
            let lengths = shrunk.get(bug).map_or("—".to_string(), |l| {
                let (lo, hi) = (l.iter().min().unwrap(), l.iter().max().unwrap());
                if lo == hi { format!("{lo}") } else { format!("{lo}–{hi}") }
            });
            println!(
                "| {bug} | {minimal} | {} | {rare} | {frontier} | {} | {mutation} | {ratio} | {lengths} |",
                cell(Arm::Plausible).0,
                cell(Arm::RandomTokens).0
            );
        }
        if !others.is_empty() {
            println!();
            println!("other findings (campaigns that showed them): {others:?}");
        }
    }
}
