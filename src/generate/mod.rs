//! Stage 4: models → traces.
//!
//! A [`Generator`] walks the session chain (which template comes next), fills each template's
//! slots from the value pools, and, when the chain steps to the novel-message symbol, builds a
//! new message with the message chain. Each trace has its own random generator, seeded from
//! (seed, trace index), so any trace of a batch can be reproduced alone and batches can be
//! generated in parallel with identical output (frontier mode, which remembers the run, is the
//! exception: its output depends on the sequence of walks asked for).
//!
//! Modes ([`Mode`]): plausible (the chain as learned, tempered), rare (forced tail steps and
//! hostile values, [`rare`]), novel (new templates the message chain proposes, [`novel`]),
//! frontier (least-visited transitions first, [`frontier`]) and tour (every learned transition,
//! [`tour`]). Waypoints ([`waypoint`]) condition plausible sessions on visiting templates in
//! order. [`mutate`] edits traces with the same model; [`report`] measures a batch.

pub mod frontier;
pub mod hostile;
pub mod mutate;
pub mod novel;
pub mod rare;
pub mod report;
pub mod tour;
pub mod transitions;
pub mod walk;
pub mod waypoint;

use std::sync::Arc;

use rand::SeedableRng;
use rand_xoshiro::Xoshiro256PlusPlus;
use thiserror::Error;

use crate::model::Compiled;
use crate::trace::{Trace, TraceMessage};

pub use hostile::HostileLibrary;
pub use walk::{Step, Walk, fill_values, make_step, sample_tempered};

/// Errors of the generation stage.
#[derive(Debug, Error)]
pub enum GenError {
    #[error("{0}")]
    Options(String),
    /// A file given to the generator (a hostile-value library) is unusable.
    #[error("{origin}: {problem}")]
    File { origin: String, problem: String },
}

/// Which traffic to generate.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Mode {
    /// Traffic like the training data (weights sharpened or flattened by the temperature).
    Plausible,
    /// Forced steps into the tail of the session chain, and hostile slot values.
    Rare,
    /// Messages whose templates never occurred in training but the message chain proposes.
    Novel,
    /// Prefers the learned transitions least visited so far in the run.
    Frontier,
    /// A deterministic set of sessions taking every learned transition at least once.
    Tour,
}

impl Mode {
    pub const ALL: [Mode; 5] = [Mode::Plausible, Mode::Rare, Mode::Novel, Mode::Frontier, Mode::Tour];

    pub fn name(self) -> &'static str {
        match self {
            Mode::Plausible => "plausible",
            Mode::Rare => "rare",
            Mode::Novel => "novel",
            Mode::Frontier => "frontier",
            Mode::Tour => "tour",
        }
    }
}

impl std::str::FromStr for Mode {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Mode::ALL
            .into_iter()
            .find(|m| m.name() == s)
            .ok_or_else(|| format!("unknown mode `{s}` (plausible, rare, novel, frontier or tour)"))
    }
}

/// Options of a generator.
#[derive(Debug, Clone, PartialEq)]
pub struct GenOptions {
    pub mode: Mode,
    /// Next-step weights become p^(1/T), renormalised. 1 samples the chain as learned.
    pub temperature: f64,
    /// Longest trace, in messages; longer walks are cut (and marked in the header). Also the
    /// length bound of waypoint sessions and of tour sessions.
    pub max_messages: usize,
    /// Longest novel message, in tokens.
    pub max_tokens: usize,
    /// Rare mode: probability per session step of a forced step into the tail.
    pub rare_rate: f64,
    /// Rare mode: each trace holds at least this many forced steps (see [`rare`]).
    pub rare_min: u32,
    /// Rare mode: probability per slot of a hostile value (and per message of a skewed
    /// Content-Length); `None` uses `rare_rate`.
    pub hostile_rate: Option<f64>,
    /// Rare mode: where hostile values come from; `None` disables them.
    pub hostile: Option<Arc<HostileLibrary>>,
    /// Plausible mode: templates to visit in this order (see [`waypoint::resolve`]).
    pub through: Vec<String>,
    /// With waypoints: the single most probable session instead of samples.
    pub best: bool,
}

impl Default for GenOptions {
    fn default() -> Self {
        GenOptions {
            mode: Mode::Plausible,
            temperature: 1.0,
            max_messages: 200,
            max_tokens: 256,
            rare_rate: 0.05,
            rare_min: 1,
            hostile_rate: None,
            hostile: Some(HostileLibrary::builtin()),
            through: Vec::new(),
            best: false,
        }
    }
}

/// The random generator of trace `index` of a batch seeded with `seed`.
pub fn trace_rng(seed: u64, index: u64) -> Xoshiro256PlusPlus {
    // SplitMix64 finaliser over the pair, so nearby seeds and indices give unrelated streams.
    let mut z = seed ^ index.wrapping_mul(0x9E37_79B9_7F4A_7C15).wrapping_add(0xD1B5_4A32_D192_ED03);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    Xoshiro256PlusPlus::seed_from_u64(z ^ (z >> 31))
}

/// What a mode prepares once per generator.
#[derive(Debug)]
enum Prepared {
    Nothing,
    Frontier(Box<frontier::Frontier>),
    Tour(tour::Tour),
    Waypoints(Box<waypoint::Plan>),
}

/// Generates traces from a compiled model.
#[derive(Debug)]
pub struct Generator<'m> {
    model: &'m Compiled,
    options: GenOptions,
    prepared: Prepared,
}

fn check_rate(name: &str, r: f64) -> Result<(), GenError> {
    if (0.0..=1.0).contains(&r) {
        Ok(())
    } else {
        Err(GenError::Options(format!("{name} must be within 0..=1, not {r}")))
    }
}

impl<'m> Generator<'m> {
    /// A generator; fails on inconsistent options. Tour mode plans its sessions here, and
    /// waypoints build their tables here (see [`waypoint`] for the cost).
    pub fn new(model: &'m Compiled, options: GenOptions) -> Result<Generator<'m>, GenError> {
        if !(options.temperature > 0.0 && options.temperature.is_finite()) {
            return Err(GenError::Options(format!(
                "temperature must be positive, not {}",
                options.temperature
            )));
        }
        if options.max_messages == 0 || options.max_tokens == 0 {
            return Err(GenError::Options("message and token limits must be at least 1".into()));
        }
        check_rate("the rare rate", options.rare_rate)?;
        if let Some(h) = options.hostile_rate {
            check_rate("the hostile rate", h)?;
        }
        if options.best && options.through.is_empty() {
            return Err(GenError::Options("--best needs at least one --through waypoint".into()));
        }
        let prepared = if !options.through.is_empty() {
            if options.mode != Mode::Plausible || options.temperature != 1.0 {
                return Err(GenError::Options(
                    "waypoints sample the chain as learned: use them with --mode plausible and temperature 1"
                        .into(),
                ));
            }
            let sets =
                options.through.iter().map(|t| waypoint::resolve(model, t)).collect::<Result<Vec<_>, _>>()?;
            let plan = waypoint::Plan::new(&model.session, &sets, options.max_messages, options.best)?;
            Prepared::Waypoints(Box::new(plan))
        } else {
            match options.mode {
                Mode::Frontier => Prepared::Frontier(Box::new(frontier::Frontier::new(model))),
                Mode::Tour => {
                    let graph = transitions::Transitions::of(&model.session);
                    Prepared::Tour(tour::plan(&graph, options.max_messages))
                }
                _ => Prepared::Nothing,
            }
        };
        Ok(Generator { model, options, prepared })
    }

    pub fn model(&self) -> &'m Compiled {
        self.model
    }

    pub fn options(&self) -> &GenOptions {
        &self.options
    }

    /// How many traces a batch holds when `requested` were asked for: the tour's size in tour
    /// mode, 1 for the best waypoint session, else `requested`.
    pub fn batch_size(&self, requested: u64) -> u64 {
        match &self.prepared {
            Prepared::Tour(t) => t.sessions.len() as u64,
            Prepared::Waypoints(_) if self.options.best => 1,
            _ => requested,
        }
    }

    /// The planned tour (tour mode only).
    pub fn tour(&self) -> Option<&tour::Tour> {
        match &self.prepared {
            Prepared::Tour(t) => Some(t),
            _ => None,
        }
    }

    /// The waypoint tables (with `through` only).
    pub fn waypoints(&self) -> Option<&waypoint::Plan> {
        match &self.prepared {
            Prepared::Waypoints(p) => Some(p),
            _ => None,
        }
    }

    /// Learned transitions covered so far in this run (frontier mode only).
    pub fn frontier_covered(&self) -> Option<usize> {
        match &self.prepared {
            Prepared::Frontier(f) => Some(f.covered()),
            _ => None,
        }
    }

    /// The walk of trace `index` of the batch seeded with `seed`. Takes `&mut self` because
    /// frontier mode remembers what earlier walks of the run did; output is deterministic for
    /// a given sequence of calls. In tour mode, index i gives tour session i mod the tour's
    /// size (slot values still depend on seed and index).
    pub fn walk(&mut self, seed: u64, index: u64) -> Walk {
        let mut rng = trace_rng(seed, index);
        let (model, options) = (self.model, &self.options);
        match &mut self.prepared {
            Prepared::Waypoints(plan) => {
                let symbols = if options.best { plan.best() } else { plan.sample(&mut rng) };
                let mut walk = walk::of_symbols(model, options, &symbols, &mut rng);
                for (n, at) in plan.matches(&symbols).into_iter().enumerate() {
                    walk.steps[at].marks.push(format!("waypoint:{}", n + 1));
                }
                walk
            }
            Prepared::Tour(t) => match t.sessions.len() {
                0 => Walk { steps: Vec::new(), ended: true },
                n => walk::of_symbols(model, options, &t.sessions[(index % n as u64) as usize], &mut rng),
            },
            Prepared::Frontier(f) => f.walk(model, options, &mut rng),
            Prepared::Nothing => match options.mode {
                Mode::Rare => rare::rare(model, options, &mut rng),
                Mode::Novel => novel::novel(model, options, &mut rng),
                _ => walk::plausible(model, options, &mut rng),
            },
        }
    }

    /// Trace `index` of the batch seeded with `seed`, annotated.
    pub fn trace(&mut self, seed: u64, index: u64) -> Trace {
        let walk = self.walk(seed, index);
        let mut trace = walk.to_trace(self.model);
        trace.header = vec![
            ("model".into(), self.model.short_hash().to_string()),
            ("seed".into(), seed.to_string()),
            ("index".into(), index.to_string()),
            ("mode".into(), self.options.mode.name().to_string()),
        ];
        if self.options.temperature != 1.0 {
            trace.set("temperature", self.options.temperature.to_string());
        }
        if self.options.mode == Mode::Rare {
            trace.set("rare-rate", self.options.rare_rate.to_string());
        }
        if !self.options.through.is_empty() {
            let list: Vec<String> = self.options.through.iter().map(|t| format!("`{t}`")).collect();
            trace.set("through", list.join(" "));
            if self.options.best {
                trace.set("best", "most probable session");
            }
        }
        if !walk.ended {
            trace.set("cut", format!("at {} messages", self.options.max_messages));
        }
        trace
    }
}

impl Walk {
    /// Renders the walk to a trace (no header).
    pub fn to_trace(&self, model: &Compiled) -> Trace {
        Trace {
            header: Vec::new(),
            messages: self
                .steps
                .iter()
                .map(|s| TraceMessage {
                    bytes: s.render(model),
                    surprise: Some(s.surprise),
                    marks: s.marks.clone(),
                })
                .collect(),
        }
    }
}
