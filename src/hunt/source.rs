//! Where a campaign's traces come from.

use rustc_hash::FxHashSet;

use crate::generate::transitions::Transitions;
use crate::generate::{Generator, Walk};
use crate::model::Compiled;
use crate::trace::Trace;

/// What one run of a campaign sends.
#[derive(Debug, Clone)]
pub enum RunInput {
    /// A trace whose messages are sent as they are (those marked `reply` are not sent).
    Fixed(Trace),
    /// A generated walk played as a [`crate::generate::live::LiveSession`] with the source's
    /// model against a target that replies: each copied slot takes the value the target
    /// returned earlier in the session. `header` is the stored trace's header.
    Live { walk: Walk, header: Vec<(String, String)> },
}

/// A deterministic stream of traces for a campaign.
///
/// Contract: `trace` is called with indices 0, 1, 2, … in order, each once (a resumed campaign
/// calls `skip` for the indices already run, so stateful sources end up in the same state), and
/// the same sequence of calls gives the same traces.
pub trait TraceSource {
    /// Trace `index`.
    fn trace(&mut self, index: u64) -> Trace;

    /// Run `index` for a target that replies message by message (`Target::replies`); called
    /// instead of `trace` then, under the same contract. The default sends [`Self::trace`]
    /// as it is.
    fn run_input(&mut self, index: u64) -> RunInput {
        RunInput::Fixed(self.trace(index))
    }

    /// Advances past trace `index` without needing it.
    fn skip(&mut self, index: u64) {
        self.trace(index);
    }

    /// Header fields that identify the campaign; a campaign directory only resumes a campaign
    /// with equal identity.
    fn identity(&self) -> Vec<(String, String)>;

    /// Session-level transitions covered so far and learned by the model, if known.
    fn coverage(&self) -> Option<(usize, usize)> {
        None
    }

    /// The model, for token-level shrinking and annotations.
    fn model(&self) -> Option<&Compiled> {
        None
    }
}

/// Traces generated from a model.
#[derive(Debug)]
pub struct ModelSource<'m> {
    generator: Generator<'m>,
    seed: u64,
    /// The learned session transitions (see [`Transitions`]); coverage counts edges taken.
    transitions: Transitions,
    covered: FxHashSet<usize>,
    live: bool,
}

impl<'m> ModelSource<'m> {
    pub fn new(generator: Generator<'m>, seed: u64) -> ModelSource<'m> {
        let transitions = Transitions::of(&generator.model().session);
        ModelSource { generator, seed, transitions, covered: FxHashSet::default(), live: false }
    }

    /// With `true`, runs for a target that replies are live sessions
    /// ([`RunInput::Live`]): the generated walks are the same, but their copied values come
    /// from the target's replies instead of the model's expected replies. Worth it only with
    /// value flow on and a model that learned replies. Part of the campaign's identity.
    pub fn with_live_replies(mut self, live: bool) -> ModelSource<'m> {
        self.live = live;
        self
    }

    fn walk(&mut self, index: u64) -> crate::generate::Walk {
        let walk = self.generator.walk(self.seed, index);
        self.covered.extend(self.transitions.taken(&walk.templates(), walk.ended));
        walk
    }
}

impl TraceSource for ModelSource<'_> {
    fn trace(&mut self, index: u64) -> Trace {
        let walk = self.walk(index);
        let mut trace = walk.to_trace(self.generator.model());
        trace.header = self.header(&walk, index);
        trace
    }

    fn run_input(&mut self, index: u64) -> RunInput {
        if !self.live {
            return RunInput::Fixed(self.trace(index));
        }
        let walk = self.walk(index);
        let header = self.header(&walk, index);
        RunInput::Live { walk, header }
    }

    fn skip(&mut self, index: u64) {
        self.walk(index);
    }

    fn identity(&self) -> Vec<(String, String)> {
        let options = self.generator.options();
        let mut id = vec![
            ("model".to_string(), self.generator.model().short_hash().to_string()),
            ("seed".to_string(), self.seed.to_string()),
            ("mode".to_string(), options.mode.name().to_string()),
        ];
        if options.temperature != 1.0 {
            id.push(("temperature".into(), options.temperature.to_string()));
        }
        if options.mode == crate::generate::Mode::Rare {
            id.push(("rare-rate".into(), options.rare_rate.to_string()));
            id.push(("rare-min".into(), options.rare_min.to_string()));
            let hostile = match (&options.hostile, options.hostile_rate) {
                (None, _) => "none".to_string(),
                (Some(_), Some(rate)) => format!("rate {rate}"),
                (Some(_), None) => "at the rare rate".to_string(),
            };
            id.push(("hostile".into(), hostile));
        }
        id.push(("max-messages".into(), options.max_messages.to_string()));
        if !options.flow {
            id.push(("flow".into(), "off".into()));
        } else if self.live {
            id.push(("flow".into(), "live".into()));
        }
        id
    }

    fn coverage(&self) -> Option<(usize, usize)> {
        Some((self.covered.len(), self.transitions.len()))
    }

    fn model(&self) -> Option<&Compiled> {
        Some(self.generator.model())
    }
}

impl ModelSource<'_> {
    fn header(&self, walk: &Walk, index: u64) -> Vec<(String, String)> {
        let mut trace = Trace { header: self.identity(), messages: Vec::new() };
        trace.set("index", index.to_string());
        if !walk.ended {
            trace.set("cut", format!("at {} messages", self.generator.options().max_messages));
        }
        trace.header
    }
}
