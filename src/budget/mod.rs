//! What the solved circuit means for the builder: the signal budget ([`signal`]) with timing
//! ([`timing`]), front ends ([`frontend`]) and photon counting ([`counting`]); what a pulse
//! train does ([`pulsetrain`]); safety ([`safety`]); supply quality ([`stability`]);
//! transistor-held stages ([`active`]); and the parts list ([`parts`]). No IO and no output
//! format: the report renders these.

pub mod active;
pub mod counting;
pub mod frontend;
pub mod parts;
pub mod pulsetrain;
pub mod safety;
pub mod signal;
pub mod stability;
pub mod timing;
