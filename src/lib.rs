//! tracewalk learns the grammar of protocol traffic as Markov chains and uses it to test software.
//!
//! Data flows one way through the stages, each a module:
//!
//! ```text
//! bytes --read--> messages in sessions --token--> tokens and typed slots
//!       --chain--> counts and smoothed chains --model--> saved model
//!       --gen--> traces --trace--> readable, replayable text
//! ```
pub mod atomic;
pub mod chain;
pub mod escape;
pub mod feed;
pub mod generate;
pub mod inspect;
pub mod model;
pub mod read;
pub mod score;
pub mod symbol;
pub mod token;
pub mod trace;
