//! The words every command shares: the period kind (`--kind`), the false-discovery method
//! (`--fdr`) and the characteristic (`--characteristic NAME`, [`CharacteristicArg`]). A
//! characteristic or factor is checked against the plant configuration with
//! `Config::known_characteristic` and `Config::known_factor`, an unknown name answered with the
//! closest known ones ([`crate::names::unknown_name`]).

use clap::ValueEnum;

use crate::model::PeriodKind;
use crate::stats::fdr::FdrMethod;

/// The period kind of the regular checks (`--kind` of `chart` and `findings`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum Kind {
    /// One shift of one production day.
    Shift,
    /// One production day.
    Day,
    /// One ISO week of production days.
    Week,
    /// One month of production days.
    Month,
}

impl From<Kind> for PeriodKind {
    fn from(k: Kind) -> PeriodKind {
        match k {
            Kind::Shift => PeriodKind::Shift,
            Kind::Day => PeriodKind::Day,
            Kind::Week => PeriodKind::Week,
            Kind::Month => PeriodKind::Month,
        }
    }
}

/// The period kind of any stored run, ranges included (`history --kind`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum RunKind {
    /// One shift of one production day.
    Shift,
    /// One production day.
    Day,
    /// One ISO week of production days.
    Week,
    /// One month of production days.
    Month,
    /// A range of production days (`check --from A --to B`).
    Range,
}

impl From<RunKind> for PeriodKind {
    fn from(k: RunKind) -> PeriodKind {
        match k {
            RunKind::Shift => PeriodKind::Shift,
            RunKind::Day => PeriodKind::Day,
            RunKind::Week => PeriodKind::Week,
            RunKind::Month => PeriodKind::Month,
            RunKind::Range => PeriodKind::Range,
        }
    }
}

/// The false-discovery procedure (`check --fdr`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum Fdr {
    /// Benjamini-Hochberg (independent or positively dependent tests).
    Bh,
    /// Benjamini-Yekutieli (any dependence; more conservative).
    By,
}

impl From<Fdr> for FdrMethod {
    fn from(f: Fdr) -> FdrMethod {
        match f {
            Fdr::Bh => FdrMethod::BenjaminiHochberg,
            Fdr::By => FdrMethod::BenjaminiYekutieli,
        }
    }
}

/// The characteristic of a command that takes it as `--characteristic NAME` or, as in earlier
/// versions, as its first argument (flattened into the command's flags). clap requires exactly
/// one of the two (an argument group), so a command holds the name itself, never an absence.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CharacteristicArg {
    /// The characteristic's name, from whichever spelling was used.
    pub name: String,
}

/// The id of `--characteristic`.
const CHARACTERISTIC_FLAG: &str = "characteristic";
/// The id of the characteristic given first, without the flag.
const CHARACTERISTIC_FIRST: &str = "characteristic_first";

impl clap::Args for CharacteristicArg {
    fn augment_args(cmd: clap::Command) -> clap::Command {
        cmd.arg(
            clap::Arg::new(CHARACTERISTIC_FLAG)
                .long("characteristic")
                .value_name("NAME")
                .help(
                    "The characteristic (it may also stand first, without the flag, as in \
                     earlier versions)",
                ),
        )
        .arg(
            clap::Arg::new(CHARACTERISTIC_FIRST)
                .value_name("CHARACTERISTIC")
                .help("The characteristic given first, without --characteristic")
                .hide(true),
        )
        .group(
            clap::ArgGroup::new("which_characteristic")
                .required(true)
                .args([CHARACTERISTIC_FLAG, CHARACTERISTIC_FIRST]),
        )
    }

    fn augment_args_for_update(cmd: clap::Command) -> clap::Command {
        Self::augment_args(cmd)
    }
}

impl clap::FromArgMatches for CharacteristicArg {
    fn from_arg_matches(matches: &clap::ArgMatches) -> std::result::Result<Self, clap::Error> {
        Self::from_arg_matches_mut(&mut matches.clone())
    }

    fn from_arg_matches_mut(
        matches: &mut clap::ArgMatches,
    ) -> std::result::Result<Self, clap::Error> {
        // The group above is required: clap has refused the command line before this point
        // when neither spelling was given, with its own message naming both.
        let name = matches
            .remove_one::<String>(CHARACTERISTIC_FLAG)
            .or_else(|| matches.remove_one::<String>(CHARACTERISTIC_FIRST))
            .ok_or_else(|| clap::Error::new(clap::error::ErrorKind::MissingRequiredArgument))?;
        Ok(CharacteristicArg { name })
    }

    fn update_from_arg_matches(
        &mut self,
        matches: &clap::ArgMatches,
    ) -> std::result::Result<(), clap::Error> {
        *self = Self::from_arg_matches(matches)?;
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[derive(Debug, clap::Parser)]
    struct WithCharacteristic {
        #[command(flatten)]
        characteristic: CharacteristicArg,
        #[arg(long)]
        by: String,
    }

    fn parse_characteristic(args: &[&str]) -> std::result::Result<String, clap::Error> {
        use clap::Parser;
        let argv = std::iter::once("samewise").chain(args.iter().copied());
        WithCharacteristic::try_parse_from(argv).map(|w| w.characteristic.name)
    }

    #[test]
    fn the_characteristic_is_taken_from_either_spelling_and_required_by_clap() {
        assert_eq!(
            parse_characteristic(&["--characteristic", "bore", "--by", "machine"]).unwrap(),
            "bore"
        );
        assert_eq!(
            parse_characteristic(&["bore", "--by", "machine"]).unwrap(),
            "bore"
        );
        // Neither spelling: clap's own message names the flag.
        let e = parse_characteristic(&["--by", "machine"]).unwrap_err();
        assert_eq!(
            e.kind(),
            clap::error::ErrorKind::MissingRequiredArgument,
            "{e}"
        );
        assert!(e.to_string().contains("--characteristic <NAME>"), "{e}");
        // Both spellings at once are refused, not silently resolved.
        let e =
            parse_characteristic(&["bore", "--characteristic", "width", "--by", "m"]).unwrap_err();
        assert_eq!(e.kind(), clap::error::ErrorKind::ArgumentConflict, "{e}");
    }

    #[test]
    fn kinds_map_to_the_model() {
        assert_eq!(PeriodKind::from(Kind::Week), PeriodKind::Week);
        assert_eq!(PeriodKind::from(RunKind::Range), PeriodKind::Range);
        for k in RunKind::value_variants() {
            let name = k.to_possible_value().unwrap().get_name().to_string();
            assert_eq!(PeriodKind::from(*k).as_str(), name);
        }
        for k in Kind::value_variants() {
            let name = k.to_possible_value().unwrap().get_name().to_string();
            assert_eq!(PeriodKind::from(*k).as_str(), name);
        }
        assert_eq!(FdrMethod::from(Fdr::By), FdrMethod::BenjaminiYekutieli);
    }
}
