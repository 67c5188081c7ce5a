//! Reserved symbol ids shared by both chains.
//!
//! Every chain works over `u32` symbols. Ids 0 and 1 mark the begin and end of a sequence (a
//! session or a message); the token vocabulary and the template list number their entries from
//! the first free id upwards.

/// Padding before the first element of a sequence; never predicted.
pub const BEGIN: u32 = 0;
/// End of a sequence; predicted like any other symbol.
pub const END: u32 = 1;
/// First id of a token in the message chain.
pub const FIRST_TOKEN: u32 = 2;
/// In the session chain: a message whose template the model has not seen.
pub const NOVEL: u32 = 2;
/// First id of a template in the session chain.
pub const FIRST_TEMPLATE: u32 = 3;
