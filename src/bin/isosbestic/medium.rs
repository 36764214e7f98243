//! Flags describing the solution medium of the speciation (activity corrections, background
//! electrolyte, concentration scale) and the concentration basis (thermal expansion), shared by
//! `fit`, `resolve` (hybrid option) and `simulate`, so that they are spelled and parsed once.

use clap::{Args, ValueEnum};
use isosbestic::resolve::hard::ConcentrationBasis;
use isosbestic::thermo::{
    ActivityCorrection, ConcentrationScale, Davies, DensityTable, ExtendedDebyeHuckel, SolventDensity,
};
use std::path::PathBuf;

#[derive(Debug, Clone, Copy, ValueEnum)]
enum ActivityArg {
    /// No correction: constant ionic medium, conditional constants (the default).
    None,
    /// Davies equation (thermodynamic constants; every species needs a charge).
    Davies,
    /// Extended Debye–Hückel with the Bates–Guggenheim size term (B·å = 1.5).
    ExtendedDebyeHuckel,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
enum ScaleArg {
    /// mol/L (the default).
    Molar,
    /// mol/kg of solvent (dilute approximation: kg of solvent per litre = ρ_solvent(T)/1000).
    Molal,
}

#[derive(Debug, Clone, Copy, ValueEnum)]
enum ExpansionArg {
    /// Totals are used as given.
    None,
    /// Totals scale with the density of water between preparation and measurement.
    Water,
}

/// Activity corrections, background electrolyte and concentration scale of the constants.
#[derive(Debug, Args)]
pub struct MediumArgs {
    /// Activity corrections (off by default: constant ionic medium, conditional constants).
    /// Needs `charge` on the model's components.
    #[arg(long, value_enum)]
    activity: Option<ActivityArg>,
    /// Ionic strength of the inert background electrolyte, mol/L as prepared (with --activity).
    #[arg(long, value_name = "MOL_PER_L")]
    medium_ionic_strength: Option<f64>,
    /// Concentration scale of the formation constants.
    #[arg(long, value_enum)]
    scale: Option<ScaleArg>,
}

impl MediumArgs {
    /// The activity model, when --activity was given.
    pub fn activity(&self) -> Option<ActivityCorrection> {
        self.activity.map(|a| match a {
            ActivityArg::None => ActivityCorrection::None,
            ActivityArg::Davies => ActivityCorrection::Davies(Davies::default()),
            ActivityArg::ExtendedDebyeHuckel => {
                ActivityCorrection::ExtendedDebyeHuckel(ExtendedDebyeHuckel::default())
            }
        })
    }

    /// The background ionic strength, mol/L, when --medium-ionic-strength was given.
    pub fn medium_ionic_strength(&self) -> Option<f64> {
        self.medium_ionic_strength
    }

    /// The concentration scale, when --scale was given.
    pub fn scale(&self) -> Option<ConcentrationScale> {
        self.scale.map(|s| match s {
            ScaleArg::Molar => ConcentrationScale::Molar,
            ScaleArg::Molal => ConcentrationScale::molal_dilute(),
        })
    }

    /// The flags given, as spelled on the command line.
    pub fn given(&self) -> Vec<&'static str> {
        [
            (self.activity.is_some(), "--activity"),
            (self.medium_ionic_strength.is_some(), "--medium-ionic-strength"),
            (self.scale.is_some(), "--scale"),
        ]
        .into_iter()
        .filter_map(|(on, name)| on.then_some(name))
        .collect()
    }
}

/// How the totals at the measurement temperature follow from those prepared.
#[derive(Debug, Args)]
pub struct ExpansionArgs {
    /// Thermal expansion of the solutions between preparation and measurement.
    #[arg(long, value_enum, conflicts_with = "density_table")]
    expansion: Option<ExpansionArg>,
    /// Density table of the solvent or brine (CSV: temperature_C or temperature_K,
    /// density_kg_m3): totals scale with ρ(T)/ρ(T_prep) from this table (thermal expansion).
    /// In a `fit` configuration file: `density_table = "<CSV>"` at the top.
    #[arg(long, value_name = "CSV")]
    pub density_table: Option<PathBuf>,
}

impl ExpansionArgs {
    /// The basis named by --expansion, when given (--density-table is read by the caller:
    /// `fit` keeps the path in its run configuration, `resolve` reads it with [`Self::basis`]).
    pub fn expansion(&self) -> Option<ConcentrationBasis> {
        self.expansion.map(|e| match e {
            ExpansionArg::None => ConcentrationBasis::AsGiven,
            ExpansionArg::Water => ConcentrationBasis::ThermalExpansion(SolventDensity::Water),
        })
    }

    /// The basis from either flag, reading the density table (`None` when neither was given).
    ///
    /// # Errors
    /// An unreadable or invalid density table, naming the file, line and column.
    pub fn basis(&self) -> isosbestic::Result<Option<ConcentrationBasis>> {
        match &self.density_table {
            Some(path) => Ok(Some(ConcentrationBasis::ThermalExpansion(SolventDensity::Table(
                DensityTable::read_csv(path)?,
            )))),
            None => Ok(self.expansion()),
        }
    }

    /// The flags given, as spelled on the command line.
    pub fn given(&self) -> Vec<&'static str> {
        [
            (self.expansion.is_some(), "--expansion"),
            (self.density_table.is_some(), "--density-table"),
        ]
        .into_iter()
        .filter_map(|(on, name)| on.then_some(name))
        .collect()
    }
}
