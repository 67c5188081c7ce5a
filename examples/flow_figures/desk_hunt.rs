//! Runs until the planted bug of the ticket desk (`examples/ticket_desk.rs`) shows, with the
//! desk driven in process: the second value-flow figure, measured at library level.
//!
//! A run is one generated session played against a fresh desk, message by message. What the
//! desk answers goes back into the session only in [`Feed::Live`] (what a hunt with reply
//! capture does); [`Feed::Offline`] sends the walk as generated, its copies resolved against
//! the model's expected replies (traces written first, replayed later); with flow off the slots
//! are filled from the pools independently.

use tracewalk::generate::live::LiveSession;
use tracewalk::generate::{GenOptions, Generator, trace_rng};
use tracewalk::model::Compiled;

use crate::desk::Desk;

/// How a run's messages are made.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Feed {
    /// Value flow on; the desk's replies fill the later messages.
    Live,
    /// Value flow on; the session is sent as generated.
    Offline,
    /// Value flow off.
    NoFlow,
}

impl Feed {
    pub fn name(self) -> &'static str {
        match self {
            Feed::Live => "flow on, replies captured",
            Feed::Offline => "flow on, sent as generated",
            Feed::NoFlow => "flow off",
        }
    }
}

/// Plays run `index` of the campaign seeded `seed`; true when the desk crashed.
pub fn run_once(generator: &mut Generator<'_>, model: &Compiled, feed: Feed, seed: u64, index: u64) -> bool {
    use rand::RngExt;
    let walk = generator.walk(seed, index);
    // The desk draws its ticket ids from a seed of its own, different in every run.
    let mut desk = Desk::new(trace_rng(seed ^ 0xD35C, index).random::<u64>());
    if feed == Feed::Live {
        let mut live = LiveSession::new(model, walk).expect("model reads its own options");
        while let Some(message) = live.next_message() {
            match desk.handle(String::from_utf8_lossy(&message).trim_end()) {
                Ok(replies) => {
                    let bytes: String = replies.iter().map(|r| format!("{r}\n")).collect();
                    live.observe_reply(bytes.as_bytes());
                }
                Err(_) => return true,
            }
        }
        return false;
    }
    walk.steps.iter().any(|s| desk.handle(String::from_utf8_lossy(&s.render(model)).trim_end()).is_err())
}

/// Runs until the first crash (1-based), or `None` within `budget` runs.
pub fn runs_to_find(model: &Compiled, feed: Feed, seed: u64, budget: u64) -> Option<u64> {
    let options = GenOptions { flow: feed != Feed::NoFlow, ..GenOptions::default() };
    let mut generator = Generator::new(model, options).expect("options");
    (0..budget).find(|&i| run_once(&mut generator, model, feed, seed, i)).map(|i| i + 1)
}
