//! Commands that run many solves of the core: sizing a base from requirements ([`sizing`]),
//! tolerance statistics ([`spread`]), parameter sweeps ([`sweep`]) and side-by-side
//! comparison ([`compare`]).

pub mod compare;
pub mod sizing;
pub mod spread;
pub mod sweep;
