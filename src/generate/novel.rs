//! Novel mode: messages whose templates never occurred in training but that the message chain
//! finds plausible.
//!
//! The session chain picks the next template as in plausible mode. That template is then
//! varied: its first `k` tokens are kept (`k` uniform over 1..=length, so the first token,
//! typically the command or the method, stays) and the message chain continues from there, on
//! learned transitions as plausible traffic does, until it ends the message. A result that is
//! a template seen in training, or is cut at the token limit, is rejected and another cut
//! tried, up to [`NOVEL_TRIES`] times; if every try fails the template is sent as learned (and
//! counts as not new in the report: short templates such as `PING` have no variations).
//! Every token after the cut is a draw from the message chain in its context, so a new
//! message is a recombination the chain itself proposes, placed where its origin would be. A
//! token chain of fixed order does not track nesting, so some new JSON messages do not parse;
//! the report measures how many.
//!
//! The session history records the varied template's symbol, not the novel-message symbol, so
//! the rest of the session stays on course. The surprise of a new message is computed as
//! `tracewalk score` computes it: −log2 P(novel message | history) − log2 P(tokens).

use rand::{Rng, RngExt};

use super::walk::{fill_values, make_step, sample_plausible};
use super::{GenOptions, Step, Walk};
use crate::chain::Chain;
use crate::model::Compiled;
use crate::symbol::{BEGIN, END, NOVEL};
use crate::token::render::Skew;

/// Cuts tried per message before falling back to the learned template.
pub const NOVEL_TRIES: usize = 16;

/// −log2 of the message chain's probability of `tokens` followed by the end of the message.
pub fn message_bits(chain: &Chain, tokens: &[u32]) -> f64 {
    (0..=tokens.len()).map(|i| -chain.prob(&tokens[..i], tokens.get(i).copied().unwrap_or(END)).log2()).sum()
}

/// A variation of `base` that is not a template seen in training, if one is found.
pub fn vary<R: Rng + ?Sized>(
    model: &Compiled,
    options: &GenOptions,
    base: &[u32],
    rng: &mut R,
    scratch: &mut Vec<(u32, f64)>,
) -> Option<Vec<u32>> {
    for _ in 0..NOVEL_TRIES {
        let keep = rng.random_range(base.len().min(1)..=base.len());
        let mut tokens = base[..keep].to_vec();
        let mut ended = false;
        while tokens.len() < options.max_tokens {
            let s = sample_plausible(&model.message, &tokens, options.temperature, rng, scratch);
            if s == END {
                ended = true;
                break;
            }
            tokens.push(s);
        }
        if ended && !tokens.is_empty() && model.learned_template(&tokens).is_none() {
            return Some(tokens);
        }
    }
    None
}

/// A walk of novel messages.
pub fn novel<R: Rng + ?Sized>(model: &Compiled, options: &GenOptions, rng: &mut R) -> Walk {
    let mut walk = Walk::default();
    let mut history: Vec<u32> = Vec::new();
    let mut scratch = Vec::new();
    while walk.steps.len() < options.max_messages {
        let s = sample_plausible(&model.session, &history, options.temperature, rng, &mut scratch);
        if s == END {
            walk.ended = true;
            break;
        }
        // The novel-message symbol stands for rare templates: vary one that followed this step.
        let base = match s {
            NOVEL => model.sample_rare_template(history.last().copied().unwrap_or(BEGIN), rng),
            _ => Some(s),
        };
        let base = base.and_then(|t| model.template(t)).unwrap_or_default();
        let step = match vary(model, options, base, rng, &mut scratch) {
            Some(tokens) => {
                let surprise =
                    -model.session.prob(&history, NOVEL).log2() + message_bits(&model.message, &tokens);
                let values = fill_values(model, &tokens, NOVEL, rng);
                Step {
                    template: NOVEL,
                    tokens,
                    values,
                    surprise,
                    marks: vec!["novel".into()],
                    skew: Skew::default(),
                    verbatim: None,
                }
            }
            None => make_step(
                model,
                options,
                &history,
                s,
                -model.session.prob(&history, s).log2(),
                rng,
                &mut scratch,
            ),
        };
        walk.steps.push(step);
        history.push(s);
    }
    walk
}
