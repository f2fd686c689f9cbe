//! The flags of one interval: what was unusual about its data, its balance or the monitor's
//! view of it. They travel as a closed set ([`Flag`]) and are written to the soft tags'
//! `flags` column as short codes (`stale:TI-2050`, `range_cp_liq:water`, `unsteady`).

use crate::core::assembly::TagStatus;
use crate::core::spec::UnitSpec;
use crate::thermo;

/// One flag on one interval. Tags and feeds are named by their index in the unit's tables.
#[derive(Debug, Clone, PartialEq)]
pub enum Flag {
    /// A sample of the tag had uncertain quality (`uncertain:TAG`).
    Uncertain(usize),
    /// Samples of the tag were outside its valid range (`range:TAG`).
    OutOfRange(usize),
    /// The tag had no usable value (`stale:TAG`, `missing:TAG`, `bad:TAG`).
    Unusable(usize, TagStatus),
    /// A feed's analyzer fractions did not sum to 1 (`composition_sum:FEED`).
    CompositionSum(usize),
    /// A pressure is mapped but had no usable value (`no_pressure`).
    NoPressure,
    /// The balance could not be solved (`solver_failed`).
    SolverFailed,
    /// No prediction this interval (`not_computed`).
    NotComputed,
    /// The conversion that reproduces the measured temperature could not be found
    /// (`apparent_conversion_unavailable`).
    ApparentConversionUnavailable,
    /// A validity flag of the balance, with the balance's own code (`range_cp_liq:water`,
    /// `two_phase_risk`, ...).
    Model(thermo::Flag),
    /// The feed is below the monitor's minimum: the unit is down (`unit_down`).
    UnitDown,
    /// The inputs are moving: statistics are frozen (`unsteady`).
    Unsteady,
    /// The residual is far outside its baseline while unsteady (`gross_residual`).
    GrossResidual,
    /// The effluent thermometer shows a spike (`spike:TAG`).
    Spike(usize),
    /// The prediction is too uncertain for statistical alerts (`uncertain_inputs`).
    UncertainInputs,
}

/// The names flags are written with, built once per unit.
#[derive(Debug, Clone, Default)]
pub struct FlagNames {
    tags: Vec<String>,
    feeds: Vec<String>,
}

impl FlagNames {
    /// The tag and feed names of a unit (feed names with `_` for spaces).
    pub fn new(spec: &UnitSpec) -> FlagNames {
        FlagNames {
            tags: spec.tags.iter().map(|t| t.name.clone()).collect(),
            feeds: spec.feeds.iter().map(|f| f.name.replace(' ', "_")).collect(),
        }
    }

    fn tag(&self, i: usize) -> &str {
        self.tags.get(i).map_or("?", String::as_str)
    }
}

impl Flag {
    /// Append the flag's code to `out`.
    pub fn write_code(&self, out: &mut String, names: &FlagNames) {
        let (word, tag) = match self {
            Flag::Uncertain(i) => ("uncertain", *i),
            Flag::OutOfRange(i) => ("range", *i),
            Flag::Unusable(i, status) => (status.as_str(), *i),
            Flag::Spike(i) => ("spike", *i),
            Flag::CompositionSum(j) => {
                out.push_str("composition_sum:");
                out.push_str(names.feeds.get(*j).map_or("?", String::as_str));
                return;
            }
            Flag::Model(f) => {
                out.push_str(&f.code());
                return;
            }
            other => {
                out.push_str(other.word());
                return;
            }
        };
        out.push_str(word);
        out.push(':');
        out.push_str(names.tag(tag));
    }

    /// The code of a flag that names nothing.
    fn word(&self) -> &'static str {
        match self {
            Flag::NoPressure => "no_pressure",
            Flag::SolverFailed => "solver_failed",
            Flag::NotComputed => "not_computed",
            Flag::ApparentConversionUnavailable => "apparent_conversion_unavailable",
            Flag::UnitDown => "unit_down",
            Flag::Unsteady => "unsteady",
            Flag::GrossResidual => "gross_residual",
            Flag::UncertainInputs => "uncertain_inputs",
            Flag::Uncertain(_)
            | Flag::OutOfRange(_)
            | Flag::Unusable(..)
            | Flag::CompositionSum(_)
            | Flag::Model(_)
            | Flag::Spike(_) => "",
        }
    }

    /// Whether two flags are written with the same code (balance flags of two reactions, for
    /// one, share theirs).
    pub fn same_code(&self, other: &Flag) -> bool {
        match (self, other) {
            (Flag::Model(a), Flag::Model(b)) => a.code() == b.code(),
            (a, b) => a == b,
        }
    }
}

/// Write flags as the soft tags' `flags` cell: codes joined by `;`.
pub fn write_codes(out: &mut String, flags: &[Flag], names: &FlagNames) {
    for (i, f) in flags.iter().enumerate() {
        if i > 0 {
            out.push(';');
        }
        f.write_code(out, names);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn names() -> FlagNames {
        FlagNames { tags: vec!["TI-2050".into(), "FI-2011".into()], feeds: vec!["ester_recycle".into()] }
    }

    fn codes(flags: &[Flag]) -> String {
        let mut s = String::new();
        write_codes(&mut s, flags, &names());
        s
    }

    #[test]
    fn codes_name_their_tag_or_feed() {
        let flags = [
            Flag::Uncertain(1),
            Flag::OutOfRange(0),
            Flag::Unusable(1, TagStatus::Stale),
            Flag::Unusable(0, TagStatus::Bad),
            Flag::CompositionSum(0),
            Flag::Spike(0),
            Flag::NotComputed,
            Flag::Unsteady,
        ];
        assert_eq!(
            codes(&flags),
            "uncertain:FI-2011;range:TI-2050;stale:FI-2011;bad:TI-2050;composition_sum:ester_recycle;spike:TI-2050;not_computed;unsteady"
        );
        assert_eq!(codes(&[]), "");
    }

    #[test]
    fn balance_flags_keep_their_own_code() {
        let a = Flag::Model(thermo::Flag::ConversionOutOfRange { reaction: 0, value: 1.2 });
        let b = Flag::Model(thermo::Flag::ConversionOutOfRange { reaction: 1, value: -0.1 });
        assert_eq!(codes(std::slice::from_ref(&a)), "conversion_out_of_range");
        assert!(a.same_code(&b) && a != b, "two reactions, one code");
        assert!(!Flag::Unusable(0, TagStatus::Stale).same_code(&Flag::Unusable(0, TagStatus::Missing)));
    }
}
