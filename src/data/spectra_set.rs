//! The measured data: wavelength axis, absorbance matrix D and each sample's conditions.

use super::history::ProcessingStep;
use ndarray::{Array1, Array2, Axis};
use serde::{Deserialize, Serialize};
use std::collections::{BTreeMap, HashSet};
use thiserror::Error;

/// 0 °C in kelvin (exact, by definition of the Celsius scale).
pub const ZERO_CELSIUS_K: f64 = 273.15;

/// Default preparation temperature of the solutions, 25 °C, in kelvin.
pub const DEFAULT_PREPARATION_K: f64 = 298.15;

/// A temperature as stated in an input, with its unit made explicit.
///
/// # Examples
/// ```
/// use isosbestic::data::Temperature;
/// approx::assert_relative_eq!(Temperature::Celsius(25.0).kelvin(), 298.15);
/// approx::assert_relative_eq!(Temperature::Kelvin(310.0).kelvin(), 310.0);
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Temperature {
    /// Kelvin.
    Kelvin(f64),
    /// Degrees Celsius.
    Celsius(f64),
}

impl Temperature {
    /// The temperature in kelvin.
    pub fn kelvin(self) -> f64 {
        match self {
            Self::Kelvin(k) => k,
            Self::Celsius(c) => c + ZERO_CELSIUS_K,
        }
    }
}

/// What a sample is for.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum SampleRole {
    /// A measured solution containing the species of interest.
    #[default]
    Measurement,
    /// A blank (solvent, medium) to subtract from measurements.
    Blank,
}

/// One recorded spectrum's conditions.
///
/// Totals are molar (mol/L) as prepared at `preparation_temperature_k`; whether and how they are
/// corrected to the measurement temperature is a modelling choice made later (thermal expansion).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Sample {
    /// Unique sample id (the spectra table's column header).
    pub id: String,
    /// Series label: samples sharing one preparation.
    pub series: String,
    /// Measurement temperature T, K.
    pub temperature_k: f64,
    /// Optical path length b, cm.
    pub path_cm: f64,
    /// Total concentration of each component, mol/L, keyed by component name.
    pub totals_m: BTreeMap<String, f64>,
    /// Temperature at which the totals were made up, K.
    pub preparation_temperature_k: f64,
    /// Measurement or blank.
    pub role: SampleRole,
    /// Extra columns of the samples table, kept verbatim.
    pub metadata: BTreeMap<String, String>,
}

impl Sample {
    /// A measurement sample with no totals, prepared at 25 °C.
    ///
    /// # Examples
    /// ```
    /// use isosbestic::data::Sample;
    /// let s = Sample::new("s1", "low", 298.15, 1.0).with_total("M", 0.01);
    /// assert_eq!(s.totals_m["M"], 0.01);
    /// ```
    pub fn new(id: impl Into<String>, series: impl Into<String>, temperature_k: f64, path_cm: f64) -> Self {
        Self {
            id: id.into(),
            series: series.into(),
            temperature_k,
            path_cm,
            totals_m: BTreeMap::new(),
            preparation_temperature_k: DEFAULT_PREPARATION_K,
            role: SampleRole::Measurement,
            metadata: BTreeMap::new(),
        }
    }

    /// The same sample with the total of `component` set, mol/L.
    #[must_use]
    pub fn with_total(mut self, component: impl Into<String>, total_m: f64) -> Self {
        self.totals_m.insert(component.into(), total_m);
        self
    }

    /// The same sample with a role.
    #[must_use]
    pub fn with_role(mut self, role: SampleRole) -> Self {
        self.role = role;
        self
    }

    /// Measurement temperature in °C.
    pub fn temperature_c(&self) -> f64 {
        self.temperature_k - ZERO_CELSIUS_K
    }
}

/// Why a spectra set could not be built.
#[derive(Debug, Clone, PartialEq, Error)]
#[non_exhaustive]
pub enum SpectraSetError {
    /// No wavelengths or no samples.
    #[error("the spectra set is empty: {what}")]
    Empty {
        /// What is missing.
        what: &'static str,
    },
    /// A dimension does not match.
    #[error("shape mismatch in {what}: expected {expected}, found {found}")]
    Shape {
        /// Which array.
        what: &'static str,
        /// Expected size.
        expected: usize,
        /// Found size.
        found: usize,
    },
    /// A wavelength is NaN or infinite.
    #[error("wavelength number {index} is not a finite number ({value})")]
    NonFiniteWavelength {
        /// 0-based index on the axis.
        index: usize,
        /// The value.
        value: f64,
    },
    /// The same wavelength appears twice.
    #[error("wavelength {wavelength_nm} nm appears more than once")]
    DuplicateWavelength {
        /// The repeated wavelength.
        wavelength_nm: f64,
    },
    /// The wavelength axis changes direction.
    #[error("the wavelength axis is not monotonic at {wavelength_nm} nm (after {previous_nm} nm)")]
    NonMonotonicWavelength {
        /// The offending wavelength.
        wavelength_nm: f64,
        /// The one before it.
        previous_nm: f64,
    },
    /// A wavelength is zero or negative.
    #[error("wavelength {wavelength_nm} nm is not positive")]
    NonPositiveWavelength {
        /// The offending wavelength.
        wavelength_nm: f64,
    },
    /// An absorbance is NaN or infinite.
    #[error("sample '{sample}' at {wavelength_nm} nm: absorbance is not a finite number ({value})")]
    NonFiniteAbsorbance {
        /// Sample id.
        sample: String,
        /// Wavelength.
        wavelength_nm: f64,
        /// The value.
        value: f64,
    },
    /// Two samples share an id.
    #[error("sample id '{id}' appears more than once")]
    DuplicateSampleId {
        /// The repeated id.
        id: String,
    },
    /// An empty sample id.
    #[error("sample number {index} has an empty id")]
    EmptySampleId {
        /// 0-based index.
        index: usize,
    },
    /// Path length not positive and finite.
    #[error("sample '{sample}': path length {value} cm must be positive and finite")]
    NonPositivePath {
        /// Sample id.
        sample: String,
        /// The value.
        value: f64,
    },
    /// Temperature not positive and finite.
    #[error("sample '{sample}': temperature {value_k} K must be above absolute zero and finite")]
    NonPositiveTemperature {
        /// Sample id.
        sample: String,
        /// The value, K.
        value_k: f64,
    },
    /// Preparation temperature not positive and finite.
    #[error("sample '{sample}': preparation temperature {value_k} K must be above absolute zero and finite")]
    NonPositivePreparationTemperature {
        /// Sample id.
        sample: String,
        /// The value, K.
        value_k: f64,
    },
    /// A negative or non-finite total.
    #[error(
        "sample '{sample}': total of '{component}' is {value} mol/L; totals must be finite and not negative"
    )]
    InvalidTotal {
        /// Sample id.
        sample: String,
        /// Component name.
        component: String,
        /// The value.
        value: f64,
    },
    /// A component total is missing for a sample.
    #[error("sample '{sample}' has no total for component '{component}'")]
    MissingTotal {
        /// Sample id.
        sample: String,
        /// Component name.
        component: String,
    },
    /// A sample states a total for a component the set does not declare.
    #[error("sample '{sample}' states a total for '{component}', which is not a component of this set")]
    UnknownComponent {
        /// Sample id.
        sample: String,
        /// Component name.
        component: String,
    },
    /// A requested sample id does not exist.
    #[error("no sample with id '{id}'")]
    NoSuchSample {
        /// The id asked for.
        id: String,
    },
}

/// Wavelength axis, absorbance matrix and sample conditions, validated.
///
/// Math: the data matrix **D** has one row per sample and one column per wavelength, so that
/// Beer–Lambert reads D = diag(b)·C·Sᵀ + E with path lengths b, concentrations C
/// (samples × species) and molar absorptivities S (wavelengths × species).
///
/// Invariants (checked by [`SpectraSet::new`]): the axis is finite, positive and strictly
/// increasing (a strictly decreasing axis is reversed on construction); D is finite with shape
/// samples × wavelengths; ids are unique and non-empty; path lengths and temperatures are positive;
/// every sample has a finite, non-negative total for every component and none for others.
///
/// A mask (same shape as D, `true` = excluded) records points that must not be used, e.g.
/// saturated absorbances; masked values stay finite in D.
///
/// # Examples
/// ```
/// use isosbestic::data::{Sample, SpectraSet};
/// use ndarray::array;
/// let set = SpectraSet::new(
///     array![400.0, 500.0, 600.0],
///     array![[0.1, 0.5, 0.2], [0.2, 0.4, 0.1]],
///     vec![
///         Sample::new("a", "s1", 298.15, 1.0).with_total("M", 0.01),
///         Sample::new("b", "s1", 318.15, 1.0).with_total("M", 0.01),
///     ],
///     vec!["M".to_string()],
/// )?;
/// assert_eq!(set.n_samples(), 2);
/// assert_eq!(set.n_wavelengths(), 3);
/// # Ok::<(), isosbestic::data::SpectraSetError>(())
/// ```
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(try_from = "SpectraSetRaw", into = "SpectraSetRaw")]
pub struct SpectraSet {
    wavelengths_nm: Array1<f64>,
    absorbance: Array2<f64>,
    mask: Array2<bool>,
    samples: Vec<Sample>,
    components: Vec<String>,
    history: Vec<ProcessingStep>,
}

/// Serialized form of a [`SpectraSet`]; validated on the way in.
#[derive(Debug, Clone, Serialize, Deserialize)]
struct SpectraSetRaw {
    wavelengths_nm: Array1<f64>,
    absorbance: Array2<f64>,
    #[serde(default)]
    mask: Option<Array2<bool>>,
    samples: Vec<Sample>,
    components: Vec<String>,
    #[serde(default)]
    history: Vec<ProcessingStep>,
}

impl TryFrom<SpectraSetRaw> for SpectraSet {
    type Error = SpectraSetError;
    fn try_from(raw: SpectraSetRaw) -> Result<Self, Self::Error> {
        let mut set = SpectraSet::new(raw.wavelengths_nm, raw.absorbance, raw.samples, raw.components)?;
        if let Some(mask) = raw.mask {
            set.set_mask(mask)?;
        }
        set.history = raw.history;
        Ok(set)
    }
}

impl From<SpectraSet> for SpectraSetRaw {
    fn from(set: SpectraSet) -> Self {
        Self {
            wavelengths_nm: set.wavelengths_nm,
            absorbance: set.absorbance,
            mask: Some(set.mask),
            samples: set.samples,
            components: set.components,
            history: set.history,
        }
    }
}

impl SpectraSet {
    /// Builds and validates a spectra set.
    ///
    /// `absorbance` is samples × wavelengths. A strictly decreasing axis is reversed together with
    /// the columns of `absorbance`.
    ///
    /// # Errors
    /// A [`SpectraSetError`] naming the first offending sample, wavelength or component.
    pub fn new(
        wavelengths_nm: Array1<f64>,
        absorbance: Array2<f64>,
        samples: Vec<Sample>,
        components: Vec<String>,
    ) -> Result<Self, SpectraSetError> {
        let (wavelengths_nm, absorbance) = normalise_axis(wavelengths_nm, absorbance)?;
        validate_samples(&samples, &components)?;
        if absorbance.nrows() != samples.len() {
            return Err(SpectraSetError::Shape {
                what: "absorbance rows (one per sample)",
                expected: samples.len(),
                found: absorbance.nrows(),
            });
        }
        if let Some(((i, j), v)) = absorbance.indexed_iter().find(|(_, v)| !v.is_finite()) {
            return Err(SpectraSetError::NonFiniteAbsorbance {
                sample: samples[i].id.clone(),
                wavelength_nm: wavelengths_nm[j],
                value: *v,
            });
        }
        let mask = Array2::from_elem(absorbance.raw_dim(), false);
        Ok(Self {
            wavelengths_nm,
            absorbance,
            mask,
            samples,
            components,
            history: Vec::new(),
        })
    }

    /// Wavelength axis λ, nm, strictly increasing.
    pub fn wavelengths_nm(&self) -> &Array1<f64> {
        &self.wavelengths_nm
    }

    /// Absorbance matrix D, samples × wavelengths.
    pub fn absorbance(&self) -> &Array2<f64> {
        &self.absorbance
    }

    /// Exclusion mask, same shape as D; `true` marks a point that must not be used.
    pub fn mask(&self) -> &Array2<bool> {
        &self.mask
    }

    /// Number of masked points.
    pub fn masked_count(&self) -> usize {
        match self.mask.as_slice() {
            Some(flat) => flat.iter().map(|&m| usize::from(m)).sum(),
            None => self.mask.iter().filter(|m| **m).count(),
        }
    }

    /// Indices of wavelengths where no sample is masked.
    pub fn unmasked_wavelength_indices(&self) -> Vec<usize> {
        // row by row (the mask's memory order), not column by column
        let mut any = vec![false; self.n_wavelengths()];
        for row in self.mask.rows() {
            for (a, &m) in any.iter_mut().zip(row) {
                *a |= m;
            }
        }
        any.iter()
            .enumerate()
            .filter(|(_, a)| !**a)
            .map(|(j, _)| j)
            .collect()
    }

    /// The samples, in row order of D.
    pub fn samples(&self) -> &[Sample] {
        &self.samples
    }

    /// Component names, in the order used by [`SpectraSet::totals_matrix`].
    pub fn components(&self) -> &[String] {
        &self.components
    }

    /// The processing history, oldest first.
    pub fn history(&self) -> &[ProcessingStep] {
        &self.history
    }

    /// Number of samples (rows of D).
    pub fn n_samples(&self) -> usize {
        self.samples.len()
    }

    /// Number of wavelengths (columns of D).
    pub fn n_wavelengths(&self) -> usize {
        self.wavelengths_nm.len()
    }

    /// Row index of the sample with id `id`.
    pub fn sample_index(&self, id: &str) -> Option<usize> {
        self.samples.iter().position(|s| s.id == id)
    }

    /// Distinct series labels, in order of first appearance.
    pub fn series(&self) -> Vec<String> {
        let mut seen = HashSet::new();
        self.samples
            .iter()
            .filter(|s| seen.insert(s.series.clone()))
            .map(|s| s.series.clone())
            .collect()
    }

    /// Temperatures T of all samples, K.
    pub fn temperatures_k(&self) -> Array1<f64> {
        self.samples.iter().map(|s| s.temperature_k).collect()
    }

    /// Path lengths b of all samples, cm.
    pub fn path_lengths_cm(&self) -> Array1<f64> {
        self.samples.iter().map(|s| s.path_cm).collect()
    }

    /// Totals as prepared, samples × components (order of [`SpectraSet::components`]), mol/L.
    pub fn totals_matrix(&self) -> Array2<f64> {
        let mut out = Array2::zeros((self.n_samples(), self.components.len()));
        for (i, s) in self.samples.iter().enumerate() {
            for (k, c) in self.components.iter().enumerate() {
                out[[i, k]] = s.totals_m[c];
            }
        }
        out
    }

    /// Records a step in the history.
    pub fn push_history(&mut self, step: ProcessingStep) {
        self.history.push(step);
    }

    /// Replaces the exclusion mask.
    ///
    /// # Errors
    /// [`SpectraSetError::Shape`] if the mask does not have the shape of D.
    pub fn set_mask(&mut self, mask: Array2<bool>) -> Result<(), SpectraSetError> {
        if mask.dim() != self.absorbance.dim() {
            return Err(SpectraSetError::Shape {
                what: "mask elements",
                expected: self.absorbance.len(),
                found: mask.len(),
            });
        }
        self.mask = mask;
        Ok(())
    }

    /// A new set with the same samples, components and history but new data, revalidated.
    ///
    /// Used by preprocessing steps that change the axis or the values; the caller records the
    /// step with [`SpectraSet::push_history`]. The mask is carried over when the shape is
    /// unchanged and cleared otherwise.
    ///
    /// # Errors
    /// As [`SpectraSet::new`].
    pub fn with_data(
        &self,
        wavelengths_nm: Array1<f64>,
        absorbance: Array2<f64>,
    ) -> Result<Self, SpectraSetError> {
        let mut out = Self::new(
            wavelengths_nm,
            absorbance,
            self.samples.clone(),
            self.components.clone(),
        )?;
        if out.absorbance.dim() == self.absorbance.dim() && out.wavelengths_nm == self.wavelengths_nm {
            out.mask = self.mask.clone();
        }
        out.history = self.history.clone();
        Ok(out)
    }

    /// A new set holding only the samples with the given ids, in the given order.
    ///
    /// # Errors
    /// [`SpectraSetError::NoSuchSample`] for an unknown id; [`SpectraSetError::Empty`] for none.
    pub fn select_samples(&self, ids: &[&str]) -> Result<Self, SpectraSetError> {
        let rows = ids
            .iter()
            .map(|id| {
                self.sample_index(id)
                    .ok_or_else(|| SpectraSetError::NoSuchSample {
                        id: (*id).to_string(),
                    })
            })
            .collect::<Result<Vec<_>, _>>()?;
        let mut out = Self::new(
            self.wavelengths_nm.clone(),
            self.absorbance.select(Axis(0), &rows),
            rows.iter().map(|&i| self.samples[i].clone()).collect(),
            self.components.clone(),
        )?;
        out.mask = self.mask.select(Axis(0), &rows);
        out.history = self.history.clone();
        out.push_history(ProcessingStep::SamplesSelected {
            kept: ids.iter().map(|s| (*s).to_string()).collect(),
        });
        Ok(out)
    }

    /// Ids of samples with the measurement role (not blanks).
    pub fn measurement_ids(&self) -> Vec<&str> {
        self.samples
            .iter()
            .filter(|s| s.role == SampleRole::Measurement)
            .map(|s| s.id.as_str())
            .collect()
    }
}

fn normalise_axis(
    wavelengths_nm: Array1<f64>,
    absorbance: Array2<f64>,
) -> Result<(Array1<f64>, Array2<f64>), SpectraSetError> {
    let n = wavelengths_nm.len();
    if n == 0 {
        return Err(SpectraSetError::Empty {
            what: "no wavelengths",
        });
    }
    if absorbance.ncols() != n {
        return Err(SpectraSetError::Shape {
            what: "absorbance columns (one per wavelength)",
            expected: n,
            found: absorbance.ncols(),
        });
    }
    for (index, &value) in wavelengths_nm.iter().enumerate() {
        if !value.is_finite() {
            return Err(SpectraSetError::NonFiniteWavelength { index, value });
        }
        if value <= 0.0 {
            return Err(SpectraSetError::NonPositiveWavelength { wavelength_nm: value });
        }
    }
    let decreasing = n >= 2 && wavelengths_nm[1] < wavelengths_nm[0];
    for w in wavelengths_nm.windows(2) {
        let (prev, next) = (w[0], w[1]);
        #[allow(clippy::float_cmp)] // exact repetition is what is being detected
        if prev == next {
            return Err(SpectraSetError::DuplicateWavelength { wavelength_nm: next });
        }
        if (next < prev) != decreasing {
            return Err(SpectraSetError::NonMonotonicWavelength {
                wavelength_nm: next,
                previous_nm: prev,
            });
        }
    }
    if decreasing {
        let rev_w = wavelengths_nm.slice(ndarray::s![..;-1]).to_owned();
        let rev_a = absorbance.slice(ndarray::s![.., ..;-1]).to_owned();
        Ok((rev_w, rev_a))
    } else {
        Ok((wavelengths_nm, absorbance))
    }
}

fn validate_samples(samples: &[Sample], components: &[String]) -> Result<(), SpectraSetError> {
    if samples.is_empty() {
        return Err(SpectraSetError::Empty { what: "no samples" });
    }
    let mut ids = HashSet::new();
    for (index, s) in samples.iter().enumerate() {
        if s.id.trim().is_empty() {
            return Err(SpectraSetError::EmptySampleId { index });
        }
        if !ids.insert(s.id.as_str()) {
            return Err(SpectraSetError::DuplicateSampleId { id: s.id.clone() });
        }
        if !(s.path_cm.is_finite() && s.path_cm > 0.0) {
            return Err(SpectraSetError::NonPositivePath {
                sample: s.id.clone(),
                value: s.path_cm,
            });
        }
        if !(s.temperature_k.is_finite() && s.temperature_k > 0.0) {
            return Err(SpectraSetError::NonPositiveTemperature {
                sample: s.id.clone(),
                value_k: s.temperature_k,
            });
        }
        if !(s.preparation_temperature_k.is_finite() && s.preparation_temperature_k > 0.0) {
            return Err(SpectraSetError::NonPositivePreparationTemperature {
                sample: s.id.clone(),
                value_k: s.preparation_temperature_k,
            });
        }
        for c in components {
            match s.totals_m.get(c) {
                None => {
                    return Err(SpectraSetError::MissingTotal {
                        sample: s.id.clone(),
                        component: c.clone(),
                    });
                }
                Some(&v) if !(v.is_finite() && v >= 0.0) => {
                    return Err(SpectraSetError::InvalidTotal {
                        sample: s.id.clone(),
                        component: c.clone(),
                        value: v,
                    });
                }
                Some(_) => {}
            }
        }
        if let Some(extra) = s.totals_m.keys().find(|k| !components.contains(k)) {
            return Err(SpectraSetError::UnknownComponent {
                sample: s.id.clone(),
                component: extra.clone(),
            });
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    fn two_samples() -> Vec<Sample> {
        vec![
            Sample::new("a", "s", 298.15, 1.0).with_total("M", 0.01),
            Sample::new("b", "s", 308.15, 1.0).with_total("M", 0.01),
        ]
    }

    fn build(w: Array1<f64>, d: Array2<f64>, s: Vec<Sample>) -> Result<SpectraSet, SpectraSetError> {
        SpectraSet::new(w, d, s, vec!["M".into()])
    }

    #[test]
    fn a_decreasing_axis_is_reversed_with_its_columns() {
        let set = build(
            array![600.0, 500.0],
            array![[1.0, 2.0], [3.0, 4.0]],
            two_samples(),
        )
        .unwrap();
        assert_eq!(set.wavelengths_nm(), &array![500.0, 600.0]);
        assert_eq!(set.absorbance(), &array![[2.0, 1.0], [4.0, 3.0]]);
    }

    #[test]
    fn a_zigzag_axis_is_rejected_naming_the_wavelength() {
        let e = build(array![400.0, 500.0, 450.0], Array2::zeros((2, 3)), two_samples()).unwrap_err();
        assert!(
            matches!(e, SpectraSetError::NonMonotonicWavelength { wavelength_nm, .. } if (wavelength_nm - 450.0).abs() < 1e-12)
        );
        assert!(e.to_string().contains("450 nm"));
    }

    #[test]
    fn duplicate_wavelengths_are_rejected() {
        let e = build(array![400.0, 400.0], Array2::zeros((2, 2)), two_samples()).unwrap_err();
        assert!(matches!(e, SpectraSetError::DuplicateWavelength { .. }));
    }

    #[test]
    fn non_finite_absorbance_names_sample_and_wavelength() {
        let e = build(
            array![400.0, 500.0],
            array![[0.0, 0.0], [0.0, f64::NAN]],
            two_samples(),
        )
        .unwrap_err();
        assert!(matches!(&e, SpectraSetError::NonFiniteAbsorbance { sample, .. } if sample == "b"));
        assert!(e.to_string().contains("'b' at 500 nm"));
    }

    #[test]
    fn bad_sample_conditions_are_rejected() {
        let mut s = two_samples();
        s[1].path_cm = 0.0;
        assert!(matches!(
            build(array![1.0], Array2::zeros((2, 1)), s).unwrap_err(),
            SpectraSetError::NonPositivePath { .. }
        ));
        let mut s = two_samples();
        s[0].temperature_k = -3.0;
        assert!(matches!(
            build(array![1.0], Array2::zeros((2, 1)), s).unwrap_err(),
            SpectraSetError::NonPositiveTemperature { .. }
        ));
        let mut s = two_samples();
        s[0].totals_m.insert("M".into(), -1e-3);
        assert!(matches!(
            build(array![1.0], Array2::zeros((2, 1)), s).unwrap_err(),
            SpectraSetError::InvalidTotal { .. }
        ));
        let mut s = two_samples();
        s[1].id = "a".into();
        assert!(matches!(
            build(array![1.0], Array2::zeros((2, 1)), s).unwrap_err(),
            SpectraSetError::DuplicateSampleId { .. }
        ));
        let mut s = two_samples();
        s[0].totals_m.clear();
        assert!(matches!(
            build(array![1.0], Array2::zeros((2, 1)), s).unwrap_err(),
            SpectraSetError::MissingTotal { .. }
        ));
    }

    #[test]
    fn shape_mismatch_is_rejected() {
        let e = build(array![1.0, 2.0], Array2::zeros((3, 2)), two_samples()).unwrap_err();
        assert!(matches!(
            e,
            SpectraSetError::Shape {
                expected: 2,
                found: 3,
                ..
            }
        ));
    }

    #[test]
    fn json_round_trip_keeps_everything_and_revalidates() {
        let mut set = build(
            array![400.0, 500.0],
            array![[0.1, 0.2], [0.3, 0.4]],
            two_samples(),
        )
        .unwrap();
        set.push_history(ProcessingStep::Window {
            min_nm: 400.0,
            max_nm: 500.0,
        });
        let json = serde_json::to_string(&set).unwrap();
        let back: SpectraSet = serde_json::from_str(&json).unwrap();
        assert_eq!(back, set);
        let broken = json.replace("\"path_cm\":1.0", "\"path_cm\":-1.0");
        assert!(serde_json::from_str::<SpectraSet>(&broken).is_err());
    }

    #[test]
    fn masked_points_are_counted_and_their_wavelengths_left_out() {
        let mut set = build(
            array![400.0, 500.0, 600.0],
            array![[0.1, 0.2, 0.3], [0.3, 0.4, 0.5]],
            two_samples(),
        )
        .unwrap();
        assert_eq!(set.masked_count(), 0);
        assert_eq!(set.unmasked_wavelength_indices(), vec![0, 1, 2]);
        set.set_mask(array![[false, false, true], [true, false, true]])
            .unwrap();
        assert_eq!(set.masked_count(), 3);
        assert_eq!(set.unmasked_wavelength_indices(), vec![1]);
        // the same on a sample subset (a mask that is a copy, not the original layout)
        let sub = set.select_samples(&["a"]).unwrap();
        assert_eq!(sub.masked_count(), 1);
        assert_eq!(sub.unmasked_wavelength_indices(), vec![0, 1]);
    }

    #[test]
    fn selecting_samples_keeps_rows_and_mask() {
        let mut set = build(
            array![400.0, 500.0],
            array![[0.1, 0.2], [0.3, 0.4]],
            two_samples(),
        )
        .unwrap();
        set.set_mask(array![[false, false], [false, true]]).unwrap();
        let sub = set.select_samples(&["b"]).unwrap();
        assert_eq!(sub.absorbance(), &array![[0.3, 0.4]]);
        assert_eq!(sub.masked_count(), 1);
        assert!(matches!(
            set.select_samples(&["zz"]),
            Err(SpectraSetError::NoSuchSample { .. })
        ));
    }
}
