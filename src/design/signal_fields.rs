//! The signal budget's part of a design: the tube's cathode and timing, `light`, `readout`,
//! `front_end` and `counting`, gathered into one checked [`SignalSpec`]. Each block lives in its
//! own module ([`super::cathode`], [`super::light`], [`super::readout`], [`super::front_end`]).

use super::{
    Checker, DesignError, RawDesign, ReadoutSpec, TubeTiming, check_cathode, check_counting,
    check_front_end, check_light, check_readout, check_transit, check_tube_timing,
};
use crate::budget::counting::CountingSpec;
use crate::budget::frontend::FrontEnd;
use crate::model::cathode::Cathode;
use crate::model::light::LightSpec;

/// Everything the signal budget reads from a design.
#[derive(Debug, Clone, PartialEq)]
pub struct SignalSpec {
    /// The photocathode (window included).
    pub cathode: Cathode,
    /// Whether the cathode was assumed (none given).
    pub cathode_assumed: bool,
    /// Single-electron timing.
    pub timing: TubeTiming,
    /// The light, if given.
    pub light: Option<LightSpec>,
    /// The readout, if given.
    pub readout: Option<ReadoutSpec>,
    /// The front end, if given.
    pub front_end: Option<FrontEnd>,
    /// Photon counting, if given.
    pub counting: Option<CountingSpec>,
}

/// Check the signal-budget fields of a raw design.
pub(super) fn check_signal(c: &Checker, raw: &RawDesign) -> Result<SignalSpec, DesignError> {
    let t = &raw.tube;
    let (cathode, cathode_assumed) = check_cathode(c, "tube", t.cathode.as_ref())?;
    let mut timing = check_tube_timing(c, "tube", t)?;
    let light = match &raw.light {
        None => None,
        Some(l) => Some(check_light(c, l)?),
    };
    let readout = match &raw.readout {
        None => None,
        Some(r) => Some(check_readout(c, r)?),
    };
    timing.transit = check_transit(c, "tube", t)?;
    let front_end = raw
        .front_end
        .as_ref()
        .map(|f| check_front_end(c, f))
        .transpose()?;
    let counting = raw
        .counting
        .as_ref()
        .map(|k| check_counting(c, k))
        .transpose()?;
    Ok(SignalSpec {
        cathode,
        cathode_assumed,
        timing,
        light,
        readout,
        front_end,
        counting,
    })
}
