//! Stage 3: symbol sequences → counts → smoothed variable-order Markov chains.
//!
//! [`GramCounter`] counts (order+1)-grams of padded sequences; [`Grams`] is the sorted, mergeable
//! table models store (counts of the top order only: every lower order is a marginal of it).
//! [`Chain`] is the compiled, smoothed chain built from a table: interpolated Kneser–Ney
//! (Kneser & Ney 1995; interpolated form and discount estimate from Chen & Goodman 1998),
//! Witten–Bell (Witten & Bell 1991) or add-one (Laplace). Sampling is O(order) per step and
//! independent of the alphabet size: Walker's alias method per context plus a coin per backoff.
//!
//! Counts are split in two parts: *fit* and *check*. Learning puts about one sequence in ten
//! (chosen by a hash of its content, so the choice is the same whatever the sharding) into the
//! check part; chains for generation use both parts, held-out perplexity is measured by building
//! from fit and evaluating on check.

mod alias;
mod build;
mod counts;
mod eval;

pub use alias::AliasTable;
pub use build::{Chain, ChainConfig, LevelTerm, Parts, Smoothing};
pub use counts::{GramCounter, Grams, Part};
pub use eval::{OrderScore, cross_entropy, entropy_rate, pick_order, stationary};
