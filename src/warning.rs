//! Plausibility warnings as typed values: a stable machine `code` for each distinct condition and
//! a sentence for people.
//!
//! A warning never blocks; the analysis returns its warnings beside the results. The code is a
//! short kebab-case name that a script may match on (`dynode report --format json` writes
//! `warnings: [{code, message}]`); the message is free to change wording, the code is not. Every
//! code is listed once in [`Code::ALL`] and in docs/json.md ("Warning codes"); a test checks the
//! two lists agree and that no code is used twice. No IO, no output format here.

use std::fmt;

/// Declares [`Code`], its list and its names from one table, so that they cannot drift apart.
macro_rules! codes {
    ($($(#[doc = $doc:literal])* $variant:ident => $name:literal,)*) => {
        /// Why a warning was raised: one variant per distinct condition.
        #[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
        #[non_exhaustive]
        pub enum Code {
            $($(#[doc = $doc])* $variant,)*
        }

        impl Code {
            /// Every code, in the order docs/json.md lists them.
            pub const ALL: &'static [Code] = &[$(Code::$variant,)*];

            /// The stable machine name (kebab-case) written to JSON.
            pub fn as_str(self) -> &'static str {
                match self {
                    $(Code::$variant => $name,)*
                }
            }
        }
    };
}

codes! {
    /// `operating.anode_current` differs by over 10 % from the pulses' average anode current.
    OperatingCurrentDiffersFromPulses => "operating-current-differs-from-pulses",
    /// A gap holds more than the tube's gap limit at the operating point.
    GapAboveTubeLimit => "gap-above-tube-limit",
    /// A divider resistor dissipates more than its power rating.
    ResistorOverPower => "resistor-over-power",
    /// A divider resistor dissipates more than half its power rating.
    ResistorAboveHalfPower => "resistor-above-half-power",
    /// A divider resistor holds more than its rated voltage.
    ResistorOverVoltage => "resistor-over-voltage",
    /// The operating point's average anode current is above the tube's rating.
    AnodeCurrentAboveRating => "anode-current-above-rating",
    /// The divider current is under ten times the anode current.
    DividerCurrentLow => "divider-current-low",
    /// The gain at the operating point is more than 1 % off its small-signal value.
    GainOffSmallSignal => "gain-off-small-signal",
    /// The base draws more than the supply's current limit.
    SupplyCurrentAboveLimit => "supply-current-above-limit",
    /// A capacitor holds more than its voltage rating.
    CapacitorOverVoltage => "capacitor-over-voltage",
    /// A decoupling capacitor's rating is under 1.5 × its gap voltage.
    CapacitorRatingMarginLow => "capacitor-rating-margin-low",
    /// A decoupling capacitor has no voltage rating in the design.
    CapacitorRatingMissing => "capacitor-rating-missing",
    /// Bleed-down after switch-off takes longer than the safe time.
    BleedDownSlow => "bleed-down-slow",
    /// Some capacitor stays charged for over an hour after switch-off.
    BleedDownOverAnHour => "bleed-down-over-an-hour",
    /// Part of the light lies outside the cathode curve's wavelength range.
    LightOutsideCathodeRange => "light-outside-cathode-range",
    /// The pulse's peak anode current is over half the tube's pulse-linearity figure.
    PulsePeakNearLinearityLimit => "pulse-peak-near-linearity-limit",
    /// The light's pulses average more anode current than the tube's rating.
    LightAverageAboveRating => "light-average-above-rating",
    /// Steady background light would ask for more anode current than the tube's rating.
    BackgroundLightAboveRating => "background-light-above-rating",
    /// The pulse-train solve failed; its section is missing.
    TrainSolveFailed => "train-solve-failed",
    /// The steady state of the train's rate was not found.
    TrainSteadyStateNotFound => "train-steady-state-not-found",
    /// The train's average anode current is above the tube's rating.
    TrainAverageAboveRating => "train-average-above-rating",
    /// The train's peak anode current is above the tube's pulse-linearity figure.
    TrainPeakAboveLinearityLimit => "train-peak-above-linearity-limit",
    /// A decoupling capacitor droops more than allowed over the train.
    TrainCapacitorDroop => "train-capacitor-droop",
    /// The gain had not recovered within the horizon after the train.
    TrainGainNotRecovered => "train-gain-not-recovered",
    /// The design has no decoupling capacitors for its train.
    TrainNoDecoupling => "train-no-decoupling",
    /// The supply's multiplier could not be solved; its section is missing.
    MultiplierSolveFailed => "multiplier-solve-failed",
    /// The multiplier's output under load is more than 2 % off the supply setting.
    MultiplierOutputOffSetting => "multiplier-output-off-setting",
    /// The multiplier's ripple modulates the gain more than the gain stability.
    MultiplierRippleAboveStability => "multiplier-ripple-above-stability",
    /// The design states a ripple and describes the multiplier too.
    SupplyRippleStatedTwice => "supply-ripple-stated-twice",
    /// A follower dissipates more than its power rating.
    FollowerOverPower => "follower-over-power",
    /// A follower stands more than its voltage rating.
    FollowerOverVoltage => "follower-over-voltage",
    /// A follower is at its current limit at the operating point.
    FollowerAtCurrentLimit => "follower-at-current-limit",
}

impl fmt::Display for Code {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// A [`Warning`] with its code and a `format!` message: `warning!(Code::X, "…{}", x)`.
macro_rules! warning {
    ($code:expr, $($arg:tt)*) => {
        $crate::warning::Warning::new($code, format!($($arg)*))
    };
}
pub(crate) use warning;

/// One plausibility warning: why (`code`) and what to tell the builder (`message`).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Warning {
    /// The condition, stable across versions.
    pub code: Code,
    /// One or more sentences for people; wording may change between versions.
    pub message: String,
}

impl Warning {
    /// A warning with its code and message.
    pub fn new(code: Code, message: impl Into<String>) -> Warning {
        Warning {
            code,
            message: message.into(),
        }
    }
}

/// A warning prints as its message, as reports always showed it.
impl fmt::Display for Warning {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(&self.message)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn codes_are_unique_kebab_case_and_all_listed() {
        let mut seen = std::collections::BTreeSet::new();
        for c in Code::ALL {
            let s = c.as_str();
            assert!(seen.insert(s), "code {s} used twice");
            assert!(
                !s.is_empty()
                    && !s.starts_with('-')
                    && !s.ends_with('-')
                    && !s.contains("--")
                    && s.chars().all(|ch| ch.is_ascii_lowercase() || ch == '-'),
                "{s} is not kebab-case"
            );
        }
        let kinds: std::collections::BTreeSet<_> = Code::ALL.iter().collect();
        assert_eq!(
            kinds.len(),
            Code::ALL.len(),
            "a variant listed twice in ALL"
        );
    }
}
