//! A preprocessing plan: which steps to run and with what settings, as a checked configuration
//! that users write in TOML, run in one fixed order.
//!
//! [`PreprocessParams`] holds unchecked settings (serde, [`Default`], builder setters);
//! [`PreprocessParams::check`] validates them into [`ValidPreprocessParams`], the only type that
//! can run ([`ValidPreprocessParams::apply`]), so a run never sees invalid settings.

use super::PreprocessError;
use super::baseline::{BaselineReport, baseline_linear, baseline_offset};
use super::blank::{BlankMatching, BlankReport, subtract_blanks};
use super::resample::{Interpolation, check_grid, even_grid, resample};
use super::saturation::{DEFAULT_SATURATION_LIMIT, SaturationReport, check_limit, mask_saturation};
use super::window::check_window;
use crate::data::SpectraSet;
use serde::{Deserialize, Serialize};

/// The common wavelength grid to resample onto.
///
/// In TOML:
/// ```toml
/// [grid.even]
/// first_nm = 400
/// last_nm = 700
/// step_nm = 2
/// method = "monotone_cubic"   # or "linear" (the default)
/// ```
/// or `grid = { explicit = { wavelengths_nm = [400, 450, 500] } }`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case", deny_unknown_fields)]
pub enum GridSpec {
    /// Evenly spaced points `first_nm, first_nm + step_nm, …` up to `last_nm` (see
    /// [`even_grid`](super::even_grid)).
    Even {
        /// First grid point, nm.
        first_nm: f64,
        /// Last grid point, nm (included when it falls on the grid).
        last_nm: f64,
        /// Spacing, nm.
        step_nm: f64,
        /// Interpolation method.
        #[serde(default)]
        method: Interpolation,
    },
    /// An explicit, strictly increasing list of wavelengths.
    Explicit {
        /// The grid, nm.
        wavelengths_nm: Vec<f64>,
        /// Interpolation method.
        #[serde(default)]
        method: Interpolation,
    },
}

impl GridSpec {
    /// The interpolation method.
    ///
    /// # Examples
    /// ```
    /// use isosbestic::preprocess::{GridSpec, Interpolation};
    /// let g = GridSpec::Explicit { wavelengths_nm: vec![400.0, 500.0], method: Interpolation::MonotoneCubic };
    /// assert_eq!(g.method(), Interpolation::MonotoneCubic);
    /// ```
    pub fn method(&self) -> Interpolation {
        match self {
            Self::Even { method, .. } | Self::Explicit { method, .. } => *method,
        }
    }

    /// The grid points, nm, checked (finite, strictly increasing, at least two).
    ///
    /// # Errors
    /// [`PreprocessError::InvalidGrid`] saying what is wrong.
    ///
    /// # Examples
    /// ```
    /// use isosbestic::preprocess::{GridSpec, Interpolation};
    /// let g = GridSpec::Even { first_nm: 400.0, last_nm: 410.0, step_nm: 5.0, method: Interpolation::Linear };
    /// assert_eq!(g.wavelengths_nm()?, vec![400.0, 405.0, 410.0]);
    /// let bad = GridSpec::Explicit { wavelengths_nm: vec![500.0, 400.0], method: Interpolation::Linear };
    /// assert!(bad.wavelengths_nm().is_err());
    /// # Ok::<(), isosbestic::preprocess::PreprocessError>(())
    /// ```
    pub fn wavelengths_nm(&self) -> Result<Vec<f64>, PreprocessError> {
        let grid = match self {
            Self::Even {
                first_nm,
                last_nm,
                step_nm,
                ..
            } => even_grid(*first_nm, *last_nm, *step_nm)?,
            Self::Explicit { wavelengths_nm, .. } => wavelengths_nm.clone(),
        };
        check_grid(&grid)?;
        Ok(grid)
    }
}

/// The baseline model and its non-absorbing window(s).
///
/// In TOML: `baseline = { offset = { window = [750, 800] } }` or
/// `baseline = { linear = { windows = [[380, 400], [750, 800]] } }`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case", deny_unknown_fields)]
pub enum BaselineSpec {
    /// Subtract each sample's mean absorbance in `window` (see [`baseline_offset`]).
    Offset {
        /// `[min_nm, max_nm]`.
        window: [f64; 2],
    },
    /// Subtract each sample's least-squares line through the `windows` (see [`baseline_linear`]).
    Linear {
        /// `[min_nm, max_nm]` pairs.
        windows: Vec<[f64; 2]>,
    },
}

/// Unchecked preprocessing settings. Every step is optional; [`Default`] runs only the
/// saturation mask at [`DEFAULT_SATURATION_LIMIT`].
///
/// Steps run in this fixed order: window → resample → blanks → baseline → saturation mask
/// (masking last, because resampling does not carry a mask over and blank and baseline
/// subtraction change the absorbances being tested).
///
/// In TOML (field names snake_case, unknown fields rejected):
/// ```toml
/// window = [380, 800]
/// blanks = "per_series"          # or "nearest_temperature", "global"
/// saturation_limit = 2.0         # or "off"
/// [grid.even]
/// first_nm = 380
/// last_nm = 800
/// step_nm = 1
/// [baseline.linear]
/// windows = [[380, 390], [780, 800]]
/// ```
///
/// # Examples
/// ```
/// use isosbestic::preprocess::{BlankMatching, PreprocessParams};
/// let p: PreprocessParams = toml::from_str("window = [380, 800]\nblanks = \"global\"")?;
/// assert_eq!(p, PreprocessParams::default().window([380.0, 800.0]).blanks(BlankMatching::Global));
/// assert_eq!(p.saturation_limit, Some(2.0));
/// let off: PreprocessParams = toml::from_str("saturation_limit = \"off\"")?;
/// assert_eq!(off.saturation_limit, None);
/// assert!(toml::from_str::<PreprocessParams>("windw = [1, 2]").is_err());
/// # Ok::<(), toml::de::Error>(())
/// ```
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(default, deny_unknown_fields)]
pub struct PreprocessParams {
    /// Keep only `[min_nm, max_nm]` (see [`window`](super::window())).
    pub window: Option<[f64; 2]>,
    /// Resample onto this grid (see [`resample`](super::resample())).
    pub grid: Option<GridSpec>,
    /// Subtract blanks matched this way (see [`subtract_blanks`]).
    pub blanks: Option<BlankMatching>,
    /// Subtract this baseline.
    pub baseline: Option<BaselineSpec>,
    /// Mask absorbances above this limit (see [`mask_saturation`]); `None` (TOML: `"off"`) masks
    /// nothing.
    #[serde(with = "limit_or_off")]
    pub saturation_limit: Option<f64>,
}

impl Default for PreprocessParams {
    fn default() -> Self {
        Self {
            window: None,
            grid: None,
            blanks: None,
            baseline: None,
            saturation_limit: Some(DEFAULT_SATURATION_LIMIT),
        }
    }
}

impl PreprocessParams {
    /// Sets [`PreprocessParams::window`] (`[min_nm, max_nm]`, or `None`).
    ///
    /// # Examples
    /// ```
    /// let p = isosbestic::preprocess::PreprocessParams::default().window([400.0, 700.0]);
    /// assert_eq!(p.window, Some([400.0, 700.0]));
    /// ```
    #[must_use]
    pub fn window(mut self, window: impl Into<Option<[f64; 2]>>) -> Self {
        self.window = window.into();
        self
    }

    /// Sets [`PreprocessParams::grid`].
    ///
    /// # Examples
    /// ```
    /// use isosbestic::preprocess::{GridSpec, Interpolation, PreprocessParams};
    /// let g = GridSpec::Even { first_nm: 400.0, last_nm: 700.0, step_nm: 1.0, method: Interpolation::Linear };
    /// let p = PreprocessParams::default().grid(g.clone());
    /// assert_eq!(p.grid, Some(g));
    /// ```
    #[must_use]
    pub fn grid(mut self, grid: impl Into<Option<GridSpec>>) -> Self {
        self.grid = grid.into();
        self
    }

    /// Sets [`PreprocessParams::blanks`].
    ///
    /// # Examples
    /// ```
    /// use isosbestic::preprocess::{BlankMatching, PreprocessParams};
    /// let p = PreprocessParams::default().blanks(BlankMatching::NearestTemperature);
    /// assert_eq!(p.blanks, Some(BlankMatching::NearestTemperature));
    /// ```
    #[must_use]
    pub fn blanks(mut self, blanks: impl Into<Option<BlankMatching>>) -> Self {
        self.blanks = blanks.into();
        self
    }

    /// Sets [`PreprocessParams::baseline`].
    ///
    /// # Examples
    /// ```
    /// use isosbestic::preprocess::{BaselineSpec, PreprocessParams};
    /// let p = PreprocessParams::default().baseline(BaselineSpec::Offset { window: [750.0, 800.0] });
    /// assert!(matches!(p.baseline, Some(BaselineSpec::Offset { .. })));
    /// ```
    #[must_use]
    pub fn baseline(mut self, baseline: impl Into<Option<BaselineSpec>>) -> Self {
        self.baseline = baseline.into();
        self
    }

    /// Sets [`PreprocessParams::saturation_limit`] (`None` turns the mask off).
    ///
    /// # Examples
    /// ```
    /// use isosbestic::preprocess::PreprocessParams;
    /// assert_eq!(PreprocessParams::default().saturation_limit(1.5).saturation_limit, Some(1.5));
    /// assert_eq!(PreprocessParams::default().saturation_limit(None).saturation_limit, None);
    /// ```
    #[must_use]
    pub fn saturation_limit(mut self, saturation_limit: impl Into<Option<f64>>) -> Self {
        self.saturation_limit = saturation_limit.into();
        self
    }

    /// Validates every number and resolves the grid.
    ///
    /// # Errors
    /// - [`PreprocessError::InvalidWindow`] for a window or baseline window with a non-finite
    ///   bound or `min > max`;
    /// - [`PreprocessError::InvalidGrid`] for a grid that is not finite, strictly increasing and
    ///   at least two points long (or an even grid with a non-positive step);
    /// - [`PreprocessError::NoBaselineWindows`] for a linear baseline without windows;
    /// - [`PreprocessError::InvalidSaturationLimit`] for a limit that is not positive and finite.
    ///
    /// # Examples
    /// ```
    /// use isosbestic::preprocess::{PreprocessError, PreprocessParams};
    /// assert!(PreprocessParams::default().check().is_ok());
    /// let e = PreprocessParams::default().window([700.0, 400.0]).check().unwrap_err();
    /// assert!(matches!(e, PreprocessError::InvalidWindow { .. }));
    /// ```
    pub fn check(self) -> Result<ValidPreprocessParams, PreprocessError> {
        if let Some([min_nm, max_nm]) = self.window {
            check_window(min_nm, max_nm)?;
        }
        let grid_nm = self.grid.as_ref().map(GridSpec::wavelengths_nm).transpose()?;
        match &self.baseline {
            Some(BaselineSpec::Offset {
                window: [min_nm, max_nm],
            }) => check_window(*min_nm, *max_nm)?,
            Some(BaselineSpec::Linear { windows }) => {
                if windows.is_empty() {
                    return Err(PreprocessError::NoBaselineWindows);
                }
                for [min_nm, max_nm] in windows {
                    check_window(*min_nm, *max_nm)?;
                }
            }
            None => {}
        }
        if let Some(limit) = self.saturation_limit {
            check_limit(limit)?;
        }
        Ok(ValidPreprocessParams {
            params: self,
            grid_nm,
        })
    }
}

/// Checked preprocessing settings, ready to run. Made by [`PreprocessParams::check`].
#[derive(Debug, Clone, PartialEq)]
pub struct ValidPreprocessParams {
    params: PreprocessParams,
    grid_nm: Option<Vec<f64>>,
}

/// What [`window`](super::window()) kept.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct WindowReport {
    /// Lower bound, nm.
    pub min_nm: f64,
    /// Upper bound, nm.
    pub max_nm: f64,
    /// Wavelengths before windowing.
    pub points_before: usize,
    /// Wavelengths kept.
    pub points_after: usize,
}

/// The grid the data were resampled onto.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ResampleReport {
    /// Interpolation used.
    pub method: Interpolation,
    /// First grid point, nm.
    pub first_nm: f64,
    /// Last grid point, nm.
    pub last_nm: f64,
    /// Number of grid points.
    pub points: usize,
}

/// Each step's report from one run of a plan; `None` for steps not run.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct PreprocessSummary {
    /// Wavelength window.
    pub window: Option<WindowReport>,
    /// Resampling.
    pub resample: Option<ResampleReport>,
    /// Blank subtraction.
    pub blanks: Option<BlankReport>,
    /// Baseline correction.
    pub baseline: Option<BaselineReport>,
    /// Saturation mask.
    pub saturation: Option<SaturationReport>,
}

impl ValidPreprocessParams {
    /// The checked settings.
    ///
    /// # Examples
    /// ```
    /// let v = isosbestic::preprocess::PreprocessParams::default().check()?;
    /// assert_eq!(v.params().saturation_limit, Some(2.0));
    /// # Ok::<(), isosbestic::preprocess::PreprocessError>(())
    /// ```
    pub fn params(&self) -> &PreprocessParams {
        &self.params
    }

    /// The resolved resampling grid, nm, if any.
    ///
    /// # Examples
    /// ```
    /// use isosbestic::preprocess::{GridSpec, Interpolation, PreprocessParams};
    /// let v = PreprocessParams::default()
    ///     .grid(GridSpec::Even { first_nm: 400.0, last_nm: 404.0, step_nm: 2.0, method: Interpolation::Linear })
    ///     .check()?;
    /// assert_eq!(v.grid_nm(), Some(&[400.0, 402.0, 404.0][..]));
    /// # Ok::<(), isosbestic::preprocess::PreprocessError>(())
    /// ```
    pub fn grid_nm(&self) -> Option<&[f64]> {
        self.grid_nm.as_deref()
    }

    /// Runs the plan on `set`: window → resample → blanks → baseline → saturation mask, each
    /// step only when configured. Every step is recorded in the returned set's history and its
    /// report in the summary.
    ///
    /// # Errors
    /// The first step's error, as documented for [`window`](super::window()),
    /// [`resample`](super::resample()), [`subtract_blanks`], [`baseline_offset`],
    /// [`baseline_linear`] and [`mask_saturation`] (e.g. a grid outside the windowed range is
    /// [`PreprocessError::OutsideRange`]).
    ///
    /// # Examples
    /// ```
    /// use isosbestic::data::{Sample, SpectraSet};
    /// use isosbestic::preprocess::{BaselineSpec, GridSpec, Interpolation, PreprocessParams};
    /// use ndarray::array;
    /// let set = SpectraSet::new(array![400.0, 410.0, 420.0, 430.0],
    ///     array![[0.1, 0.7, 0.3, 0.1]], vec![Sample::new("a", "s", 298.15, 1.0)], vec![])?;
    /// let plan = PreprocessParams::default()
    ///     .grid(GridSpec::Even { first_nm: 400.0, last_nm: 430.0, step_nm: 5.0, method: Interpolation::Linear })
    ///     .baseline(BaselineSpec::Offset { window: [400.0, 400.0] })
    ///     .check()?;
    /// let (out, summary) = plan.apply(&set)?;
    /// assert_eq!(out.n_wavelengths(), 7);
    /// approx::assert_abs_diff_eq!(out.absorbance()[[0, 1]], 0.3, epsilon = 1e-12); // (0.1 + 0.7)/2 − 0.1
    /// assert_eq!(summary.resample.map(|r| r.points), Some(7));
    /// assert_eq!(out.history().len(), 3); // resampled, baseline, saturation mask
    /// # Ok::<(), Box<dyn std::error::Error>>(())
    /// ```
    pub fn apply(&self, set: &SpectraSet) -> Result<(SpectraSet, PreprocessSummary), PreprocessError> {
        let p = &self.params;
        let mut summary = PreprocessSummary::default();
        let mut current = set.clone();
        if let Some([min_nm, max_nm]) = p.window {
            let points_before = current.n_wavelengths();
            current = super::window::window(&current, min_nm, max_nm)?;
            summary.window = Some(WindowReport {
                min_nm,
                max_nm,
                points_before,
                points_after: current.n_wavelengths(),
            });
        }
        if let (Some(spec), Some(grid)) = (&p.grid, &self.grid_nm) {
            current = resample(&current, grid, spec.method(), "preprocessing plan: common grid")?;
            summary.resample = Some(ResampleReport {
                method: spec.method(),
                first_nm: grid.first().copied().unwrap_or(f64::NAN),
                last_nm: grid.last().copied().unwrap_or(f64::NAN),
                points: grid.len(),
            });
        }
        if let Some(matching) = p.blanks {
            let (next, report) = subtract_blanks(&current, matching)?;
            current = next;
            summary.blanks = Some(report);
        }
        if let Some(spec) = &p.baseline {
            let (next, report) = match spec {
                BaselineSpec::Offset {
                    window: [min_nm, max_nm],
                } => baseline_offset(&current, *min_nm, *max_nm)?,
                BaselineSpec::Linear { windows } => {
                    let pairs: Vec<(f64, f64)> = windows.iter().map(|[a, b]| (*a, *b)).collect();
                    baseline_linear(&current, &pairs)?
                }
            };
            current = next;
            summary.baseline = Some(report);
        }
        if let Some(limit) = p.saturation_limit {
            let (next, report) = mask_saturation(&current, limit)?;
            current = next;
            summary.saturation = Some(report);
        }
        Ok((current, summary))
    }
}

/// Serde for `saturation_limit`: a number, or `"off"` (also JSON `null`) for no mask. TOML has
/// no null, so `None` is written as `"off"` to survive a round trip.
mod limit_or_off {
    use serde::de::{self, Deserializer, Visitor};
    use serde::ser::Serializer;
    use std::fmt;

    pub(super) fn serialize<S: Serializer>(value: &Option<f64>, s: S) -> Result<S::Ok, S::Error> {
        match value {
            Some(v) => s.serialize_f64(*v),
            None => s.serialize_str("off"),
        }
    }

    pub(super) fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Option<f64>, D::Error> {
        d.deserialize_any(LimitVisitor)
    }

    struct LimitVisitor;

    impl<'de> Visitor<'de> for LimitVisitor {
        type Value = Option<f64>;

        fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
            f.write_str("an absorbance limit (number) or \"off\"")
        }

        fn visit_f64<E: de::Error>(self, v: f64) -> Result<Self::Value, E> {
            Ok(Some(v))
        }

        fn visit_i64<E: de::Error>(self, v: i64) -> Result<Self::Value, E> {
            Ok(Some(v as f64))
        }

        fn visit_u64<E: de::Error>(self, v: u64) -> Result<Self::Value, E> {
            Ok(Some(v as f64))
        }

        fn visit_str<E: de::Error>(self, v: &str) -> Result<Self::Value, E> {
            if v == "off" {
                Ok(None)
            } else {
                Err(E::invalid_value(de::Unexpected::Str(v), &self))
            }
        }

        fn visit_unit<E: de::Error>(self) -> Result<Self::Value, E> {
            Ok(None)
        }

        fn visit_none<E: de::Error>(self) -> Result<Self::Value, E> {
            Ok(None)
        }

        fn visit_some<D: Deserializer<'de>>(self, d: D) -> Result<Self::Value, D::Error> {
            d.deserialize_any(LimitVisitor)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn full() -> PreprocessParams {
        PreprocessParams::default()
            .window([380.0, 800.0])
            .grid(GridSpec::Even {
                first_nm: 380.0,
                last_nm: 800.0,
                step_nm: 1.0,
                method: Interpolation::MonotoneCubic,
            })
            .blanks(BlankMatching::NearestTemperature)
            .baseline(BaselineSpec::Linear {
                windows: vec![[380.0, 390.0], [780.0, 800.0]],
            })
            .saturation_limit(1.8)
    }

    #[test]
    fn the_documented_toml_example_parses() {
        let text = r#"
window = [380, 800]
blanks = "per_series"
saturation_limit = 2.0
[grid.even]
first_nm = 380
last_nm = 800
step_nm = 1
[baseline.linear]
windows = [[380, 390], [780, 800]]
"#;
        let p: PreprocessParams = toml::from_str(text).unwrap();
        assert_eq!(p.window, Some([380.0, 800.0]));
        assert_eq!(p.blanks, Some(BlankMatching::PerSeries));
        assert_eq!(p.grid.as_ref().map(GridSpec::method), Some(Interpolation::Linear));
        let v = p.check().unwrap();
        assert_eq!(v.grid_nm().map(<[f64]>::len), Some(421));
    }

    #[test]
    fn toml_and_json_round_trips_keep_every_field() {
        for p in [full(), full().saturation_limit(None), PreprocessParams::default()] {
            let text = toml::to_string(&p).unwrap();
            assert_eq!(toml::from_str::<PreprocessParams>(&text).unwrap(), p, "{text}");
            let json = serde_json::to_string(&p).unwrap();
            assert_eq!(
                serde_json::from_str::<PreprocessParams>(&json).unwrap(),
                p,
                "{json}"
            );
        }
        let none: PreprocessParams = serde_json::from_str(r#"{"saturation_limit": null}"#).unwrap();
        assert_eq!(none.saturation_limit, None);
    }

    #[test]
    fn unknown_fields_are_rejected_at_every_level() {
        for text in [
            "saturation = 2.0",
            "[grid.even]\nfirst_nm = 1\nlast_nm = 2\nstep_nm = 1\nstep = 3",
            "[baseline.offset]\nwindow = [1, 2]\nwindows = [[1, 2]]",
            "saturation_limit = \"none\"",
            "blanks = \"per_sample\"",
        ] {
            assert!(toml::from_str::<PreprocessParams>(text).is_err(), "{text}");
        }
    }

    #[test]
    fn check_rejects_each_kind_of_bad_number() {
        let bad_grid = PreprocessParams::default().grid(GridSpec::Even {
            first_nm: 400.0,
            last_nm: 500.0,
            step_nm: 0.0,
            method: Interpolation::Linear,
        });
        assert!(matches!(
            bad_grid.check(),
            Err(PreprocessError::InvalidGrid { .. })
        ));
        let one_point = PreprocessParams::default().grid(GridSpec::Explicit {
            wavelengths_nm: vec![400.0],
            method: Interpolation::Linear,
        });
        assert!(matches!(
            one_point.check(),
            Err(PreprocessError::InvalidGrid { .. })
        ));
        let nan_window = PreprocessParams::default().window([f64::NAN, 500.0]);
        assert!(matches!(
            nan_window.check(),
            Err(PreprocessError::InvalidWindow { .. })
        ));
        let bad_offset = PreprocessParams::default().baseline(BaselineSpec::Offset {
            window: [800.0, 700.0],
        });
        assert!(matches!(
            bad_offset.check(),
            Err(PreprocessError::InvalidWindow { .. })
        ));
        let no_windows = PreprocessParams::default().baseline(BaselineSpec::Linear { windows: vec![] });
        assert!(matches!(
            no_windows.check(),
            Err(PreprocessError::NoBaselineWindows)
        ));
        let bad_line = PreprocessParams::default().baseline(BaselineSpec::Linear {
            windows: vec![[1.0, 2.0], [3.0, f64::INFINITY]],
        });
        assert!(matches!(
            bad_line.check(),
            Err(PreprocessError::InvalidWindow { .. })
        ));
        for limit in [0.0, -1.0, f64::NAN, f64::INFINITY] {
            assert!(matches!(
                PreprocessParams::default().saturation_limit(limit).check(),
                Err(PreprocessError::InvalidSaturationLimit { .. })
            ));
        }
        assert!(full().check().is_ok());
    }
}
