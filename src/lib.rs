//! tracewalk learns the grammar of protocol traffic as Markov chains and uses it to test software.
//!
//! Data flows one way through the stages, each a module:
//!
//! ```text
//! bytes --read--> messages in sessions --token--> tokens and typed slots
//!       --chain--> counts and smoothed chains --model--> saved model
//!       --gen--> traces --shrink--> minimal failing traces (sees only a predicate)
//!       --harness--> target runs, verdicts --hunt--> campaigns, findings on disk
//!       --trace--> readable, replayable text
//! ```
pub mod atomic;
pub mod chain;
pub mod escape;
pub mod feed;
pub mod generate;
pub mod harness;
pub mod hunt;
pub mod inspect;
pub mod model;
pub mod read;
pub mod score;
pub mod shrink;
pub mod symbol;
pub mod token;
pub mod trace;
