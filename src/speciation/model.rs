//! The equilibrium model as written in a file ([`EquilibriumModel`]) and as checked for the
//! solver ([`ValidModel`]).

use super::SpeciationError;
use super::law::{FormationLaw, Law};
use ndarray::Array2;
use serde::{Deserialize, Deserializer, Serialize, Serializer};
use std::collections::{BTreeMap, HashSet};

/// Whether a species contributes to the absorbance (a column of S that is fitted) or not
/// (its ε(λ) is zero everywhere). In a model file: `absorbs = true` / `absorbs = false`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Optics {
    /// The species absorbs: its pure spectrum is part of the model.
    Absorbing,
    /// The species is transparent in the measured range.
    Transparent,
}

impl Serialize for Optics {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.serialize_bool(matches!(self, Optics::Absorbing))
    }
}

impl<'de> Deserialize<'de> for Optics {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        Ok(if bool::deserialize(d)? {
            Optics::Absorbing
        } else {
            Optics::Transparent
        })
    }
}

/// A component as written in a model file: a conserved building block whose total comes from
/// the samples table (column `<name>_M`). Its free form is a species of the same name.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ComponentSpec {
    /// Component name (also the name of its free species).
    pub name: String,
    /// Whether the free component absorbs (`absorbs` in the file).
    #[serde(rename = "absorbs")]
    pub optics: Optics,
    /// Optional file holding the known pure spectrum of the free component (stored, not read).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub known_spectrum: Option<String>,
    /// Optional ceiling on ε, L mol⁻¹ cm⁻¹, for a weak absorber (must be > 0).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max_absorptivity: Option<f64>,
    /// Optional charge number z of the free component (e.g. 2 for M²⁺, −1 for X⁻). Needed only
    /// for activity corrections.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub charge: Option<i32>,
}

/// A formed species as written in a model file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SpeciesSpec {
    /// Species name (distinct from every other species and every component).
    pub name: String,
    /// Integer coefficients over components, e.g. `{ M = 1, X = 2 }`; omitted components are 0.
    /// Negative coefficients are allowed (e.g. hydroxo species written with −1 H⁺).
    pub stoichiometry: BTreeMap<String, i32>,
    /// Whether the species absorbs (`absorbs` in the file).
    #[serde(rename = "absorbs")]
    pub optics: Optics,
    /// Optional file holding the known pure spectrum (stored, not read).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub known_spectrum: Option<String>,
    /// Optional ceiling on ε, L mol⁻¹ cm⁻¹, for a weak absorber (must be > 0).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub max_absorptivity: Option<f64>,
    /// How log₁₀ β of formation from the free components depends on temperature.
    pub law: Law,
    /// Optional charge number z. By default the stoichiometric sum Σⱼ aⱼ zⱼ of its components'
    /// charges (charge is conserved); a value given here must equal that sum when every
    /// component's charge is known, and is needed when some is not.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub charge: Option<i32>,
}

/// An equilibrium model as written in a TOML or JSON file: components and formed species.
///
/// The free components are species too; they are NOT listed under `species` but added
/// automatically by [`EquilibriumModel::check`] (unit stoichiometry, log β = 0 fixed), with the
/// optics given under `components`. See the [module docs](super) for a complete file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct EquilibriumModel {
    /// The components, in the order used for totals and free concentrations.
    pub components: Vec<ComponentSpec>,
    /// The formed species (complexes, protonated forms, dimers …).
    #[serde(default)]
    pub species: Vec<SpeciesSpec>,
}

/// Whether a species of a [`ValidModel`] is a free component or formed from components.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SpeciesRole {
    /// The free form of the component with this index.
    FreeComponent(usize),
    /// A species formed from the components.
    Formed,
}

/// One species of a [`ValidModel`].
#[derive(Debug, Clone, PartialEq)]
pub struct Species {
    /// Name.
    pub name: String,
    /// Coefficient of each component (dense, in component order).
    pub stoichiometry: Vec<i32>,
    /// Absorbing or transparent.
    pub optics: Optics,
    /// Optional file of the known pure spectrum.
    pub known_spectrum: Option<String>,
    /// Optional ε ceiling, L mol⁻¹ cm⁻¹.
    pub max_absorptivity: Option<f64>,
    /// Formation law (free components: fixed log β = 0).
    pub law: Law,
    /// Free component or formed species.
    pub role: SpeciesRole,
    /// Charge number z: as given, or the stoichiometric sum of the components' charges; `None`
    /// when neither is known.
    pub charge: Option<i32>,
}

/// A checked equilibrium model: the solver and the fit take only this.
///
/// Species order: the free components first (in component order), then the formed species in
/// file order. The stoichiometry matrix A (species × components) has the identity in its first
/// rows, so it always has full column rank.
#[derive(Debug, Clone, PartialEq)]
pub struct ValidModel {
    source: EquilibriumModel,
    components: Vec<String>,
    species: Vec<Species>,
    /// A as f64, species × components, row-major.
    stoichiometry: Vec<f64>,
    /// Components with a negative coefficient in some species (their totals may be ≤ 0).
    signed: Vec<bool>,
}

fn check_optics(species: &str, max_absorptivity: Option<f64>) -> Result<(), SpeciationError> {
    match max_absorptivity {
        Some(v) if !(v.is_finite() && v > 0.0) => Err(SpeciationError::InvalidMaxAbsorptivity {
            species: species.to_string(),
            value: v,
        }),
        _ => Ok(()),
    }
}

fn check_law(species: &str, law: &Law) -> Result<(), SpeciationError> {
    for (p, name) in law.parameters().iter().zip(law.parameter_names()) {
        if !p.value.is_finite() {
            return Err(SpeciationError::InvalidParameter {
                species: species.to_string(),
                parameter: (*name).to_string(),
                value: p.value,
            });
        }
    }
    let t = law.reference_temperature_k();
    if !(t.is_finite() && t > 0.0) {
        return Err(SpeciationError::InvalidParameter {
            species: species.to_string(),
            parameter: "t_ref_k".to_string(),
            value: t,
        });
    }
    Ok(())
}

impl EquilibriumModel {
    /// Parses a model from TOML text.
    ///
    /// # Errors
    /// [`SpeciationError::Parse`] with the parser's message (which gives line and column).
    pub fn from_toml_str(text: &str) -> Result<Self, SpeciationError> {
        toml::from_str(text).map_err(|e| SpeciationError::Parse {
            format: "TOML",
            message: e.to_string(),
        })
    }

    /// Parses a model from JSON text.
    ///
    /// # Errors
    /// [`SpeciationError::Parse`] with the parser's message (which gives line and column).
    pub fn from_json_str(text: &str) -> Result<Self, SpeciationError> {
        serde_json::from_str(text).map_err(|e| SpeciationError::Parse {
            format: "JSON",
            message: e.to_string(),
        })
    }

    /// Writes the model as TOML.
    ///
    /// # Errors
    /// [`SpeciationError::Parse`] if a value cannot be represented (e.g. a non-finite number).
    pub fn to_toml_string(&self) -> Result<String, SpeciationError> {
        toml::to_string(self).map_err(|e| SpeciationError::Parse {
            format: "TOML",
            message: e.to_string(),
        })
    }

    /// Validates the model into a [`ValidModel`].
    ///
    /// Rejected, each with a typed error naming the species or component:
    /// - no components; an empty name;
    /// - a component listed twice; two species with one name, or a species named like a component;
    /// - a stoichiometry naming an unknown component;
    /// - a stoichiometry whose coefficients are all zero (the species would be the solvent);
    /// - two species with identical stoichiometry, including a formed species identical to a free
    ///   component (e.g. `{ M = 1 }`): their concentrations would stay in the fixed ratio
    ///   β₁/β₂ in every sample, so only β₁ + β₂ could ever be determined;
    /// - a non-finite law parameter or a non-positive reference temperature;
    /// - a `max_absorptivity` that is not a positive finite number;
    /// - a species `charge` that differs from the stoichiometric sum of its components' charges
    ///   ([`SpeciationError::ChargeMismatch`]; charge is conserved in every formation reaction).
    ///
    /// NOT rejected, because mass action makes them distinct: a species whose stoichiometry is
    /// a sum or multiple of others' (ML₂ beside ML and L; the dimer M₂ beside M; M₂L₂ beside ML).
    /// The free components form the basis, so A always has full column rank and no rank test
    /// beyond "rows distinct" is meaningful. Negative coefficients are accepted, also in a row
    /// with no positive one (OH⁻ written as −1 H⁺ with water implicit): the mass balance stays
    /// well posed (see [`super`]).
    ///
    /// # Errors
    /// The [`SpeciationError`] variants listed above.
    pub fn check(&self) -> Result<ValidModel, SpeciationError> {
        if self.components.is_empty() {
            return Err(SpeciationError::NoComponents);
        }
        let nc = self.components.len();
        let mut names: HashSet<&str> = HashSet::new();
        let mut index: BTreeMap<&str, usize> = BTreeMap::new();
        let mut species = Vec::with_capacity(nc + self.species.len());
        for (j, comp) in self.components.iter().enumerate() {
            if comp.name.trim().is_empty() {
                return Err(SpeciationError::EmptyName {
                    what: "component",
                    index: j,
                });
            }
            if !names.insert(&comp.name) {
                return Err(SpeciationError::DuplicateComponent {
                    component: comp.name.clone(),
                });
            }
            index.insert(&comp.name, j);
            check_optics(&comp.name, comp.max_absorptivity)?;
            let mut row = vec![0; nc];
            row[j] = 1;
            species.push(Species {
                name: comp.name.clone(),
                stoichiometry: row,
                optics: comp.optics,
                known_spectrum: comp.known_spectrum.clone(),
                max_absorptivity: comp.max_absorptivity,
                law: Law::fixed_log_beta(0.0),
                role: SpeciesRole::FreeComponent(j),
                charge: comp.charge,
            });
        }
        for (k, sp) in self.species.iter().enumerate() {
            if sp.name.trim().is_empty() {
                return Err(SpeciationError::EmptyName {
                    what: "species",
                    index: k,
                });
            }
            if !names.insert(&sp.name) {
                return Err(SpeciationError::DuplicateSpecies {
                    species: sp.name.clone(),
                });
            }
            let mut row = vec![0; nc];
            for (comp, &coef) in &sp.stoichiometry {
                let Some(&j) = index.get(comp.as_str()) else {
                    return Err(SpeciationError::UnknownComponent {
                        species: sp.name.clone(),
                        component: comp.clone(),
                    });
                };
                row[j] = coef;
            }
            if row.iter().all(|&a| a == 0) {
                return Err(SpeciationError::ZeroStoichiometry {
                    species: sp.name.clone(),
                });
            }
            if let Some(other) = species.iter().find(|o| o.stoichiometry == row) {
                return Err(SpeciationError::DuplicateStoichiometry {
                    species: sp.name.clone(),
                    same_as: other.name.clone(),
                });
            }
            check_optics(&sp.name, sp.max_absorptivity)?;
            check_law(&sp.name, &sp.law)?;
            // charge is conserved: z = Σⱼ aⱼ zⱼ when every component in the species has a charge
            let from_components = row
                .iter()
                .zip(&self.components)
                .filter(|(a, _)| **a != 0)
                .map(|(a, c)| c.charge.map(|z| a * z))
                .sum::<Option<i32>>();
            let charge = match (sp.charge, from_components) {
                (Some(given), Some(sum)) if given != sum => {
                    return Err(SpeciationError::ChargeMismatch {
                        species: sp.name.clone(),
                        given,
                        from_components: sum,
                    });
                }
                (given, sum) => given.or(sum),
            };
            species.push(Species {
                name: sp.name.clone(),
                stoichiometry: row,
                optics: sp.optics,
                known_spectrum: sp.known_spectrum.clone(),
                max_absorptivity: sp.max_absorptivity,
                law: sp.law,
                role: SpeciesRole::Formed,
                charge,
            });
        }
        let stoichiometry: Vec<f64> = species
            .iter()
            .flat_map(|s| s.stoichiometry.iter().map(|&a| f64::from(a)))
            .collect();
        let signed = (0..nc)
            .map(|j| species.iter().any(|s| s.stoichiometry[j] < 0))
            .collect();
        Ok(ValidModel {
            source: self.clone(),
            components: self.components.iter().map(|c| c.name.clone()).collect(),
            species,
            stoichiometry,
            signed,
        })
    }
}

impl ValidModel {
    /// The model as written (for saving it back).
    pub fn as_model(&self) -> &EquilibriumModel {
        &self.source
    }

    /// Number of components.
    pub fn n_components(&self) -> usize {
        self.components.len()
    }

    /// Number of species (free components included).
    pub fn n_species(&self) -> usize {
        self.species.len()
    }

    /// Component names, in order.
    pub fn component_names(&self) -> &[String] {
        &self.components
    }

    /// All species: free components first, then formed species.
    pub fn species(&self) -> &[Species] {
        &self.species
    }

    /// The charge number z of every species (model order), as needed by activity corrections.
    ///
    /// # Errors
    /// [`SpeciationError::UnknownCharge`] naming the first species whose charge is neither given
    /// nor implied by its components' charges.
    ///
    /// # Examples
    /// ```
    /// use isosbestic::speciation::EquilibriumModel;
    /// let model = EquilibriumModel::from_toml_str(r#"
    ///     components = [{ name = "M", absorbs = true, charge = 2 }, { name = "X", absorbs = false, charge = -1 }]
    ///     [[species]]
    ///     name = "MX2"
    ///     stoichiometry = { M = 1, X = 2 }
    ///     absorbs = true
    ///     law = { kind = "fixed", log_beta = { value = 2.0 } }
    /// "#)?.check()?;
    /// assert_eq!(model.charges()?, vec![2, -1, 0]); // MX2 is neutral: 2 + 2·(−1)
    /// # Ok::<(), isosbestic::speciation::SpeciationError>(())
    /// ```
    pub fn charges(&self) -> Result<Vec<i32>, SpeciationError> {
        self.species
            .iter()
            .map(|s| {
                s.charge.ok_or_else(|| SpeciationError::UnknownCharge {
                    species: s.name.clone(),
                })
            })
            .collect()
    }

    /// Index of the species called `name`.
    pub fn species_index(&self, name: &str) -> Option<usize> {
        self.species.iter().position(|s| s.name == name)
    }

    /// The stoichiometry matrix A as f64, species × components, row-major.
    pub fn stoichiometry(&self) -> &[f64] {
        &self.stoichiometry
    }

    /// `true` for each component that has a negative coefficient in some species. Such a
    /// component (typically H⁺) may have a zero or negative total.
    pub fn signed_components(&self) -> &[bool] {
        &self.signed
    }

    /// Checks that every component has a total: `components_available` are the component names
    /// for which the samples table has a `<name>_M` column (or the keys of
    /// [`crate::data::Sample::totals_m`]).
    ///
    /// # Errors
    /// [`SpeciationError::MissingTotals`] listing every component without a total.
    pub fn check_totals(&self, components_available: &[String]) -> Result<(), SpeciationError> {
        let missing: Vec<String> = self
            .components
            .iter()
            .filter(|c| !components_available.contains(c))
            .cloned()
            .collect();
        if missing.is_empty() {
            Ok(())
        } else {
            Err(SpeciationError::MissingTotals { components: missing })
        }
    }

    /// log₁₀ β of every species at `t_k` (stored law parameters) written to `out`
    /// (length [`ValidModel::n_species`]; free components get 0).
    ///
    /// # Panics
    /// If `out` is shorter than the number of species.
    pub fn log10_betas_at(&self, t_k: f64, out: &mut [f64]) {
        assert!(
            out.len() >= self.species.len(),
            "output shorter than the species list"
        );
        for (o, s) in out.iter_mut().zip(&self.species) {
            *o = s.law.log10_beta_at(t_k);
        }
    }

    /// log₁₀ β of every species at each temperature: samples × species, ready for
    /// [`super::speciate_all`].
    pub fn log10_betas(&self, temperatures_k: &[f64]) -> Array2<f64> {
        let mut out = Array2::zeros((temperatures_k.len(), self.n_species()));
        for (mut row, &t) in out.rows_mut().into_iter().zip(temperatures_k) {
            for (o, s) in row.iter_mut().zip(&self.species) {
                *o = s.law.log10_beta_at(t);
            }
        }
        out
    }
}
