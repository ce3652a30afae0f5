//! Stage design (nominal, serialisable) and the mapping of a float signed weight matrix plus
//! bias onto element targets.
//!
//! The classifier acts on inputs x in [0, 1]: score_j = sum_i W_ji x_i + b_j. The bias is one
//! more input line held at x = 1, so the mapping works on the augmented matrix A = [W | b]
//! (classes x (features + 1)). The element range is [w_min, w_max].
//!
//! **Scale**: s = range_use (w_max - w_min) / m, where m is the largest entry of the matrix
//! being placed (largest shifted entry for the shifted encoding, largest |A| for the
//! differential one): the largest weight uses `range_use` of the element's range.
//!
//! **Shifted encoding**: c_i = min_j A_ji for each input line (column), element target
//! w_min + s (A_ji - c_i) >= w_min. The output is
//! `I_u [ s sum_i A_ji x_i  +  sum_i (w_min - s c_i) x_i ]`: the second term is the same for
//! every class (the common mode, left to the competition stage), and s > 0, so the class ranking
//! of the ideal outputs equals the float one.
//!
//! **Differential encoding**: two elements per weight, w+ = w_min + s max(A, 0) and
//! w- = w_min + s max(-A, 0); each output line subtracts its w- currents through a current mirror
//! (transistor pair with its own Pelgrom draws) and adds a positive offset current I_off so the
//! line stays positive. Ideal output: I_off + I_u s sum_i A_ji x_i.

use ndarray::{Array2, ArrayView1, ArrayView2};
use serde::{Deserialize, Serialize};

use super::effective::EffectiveStage;
use super::element::ElementDesign;
use super::error::{check_nonneg, check_nonneg_in, invalid, Result, WeightStageError};
use super::input::InputDesign;
use crate::device::{Polarity, Transistor};

/// How signed weights are placed on non-negative elements.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum SignedEncoding {
    /// Per input column, subtract the column's smallest weight (common mode to every class).
    #[default]
    Shifted,
    /// Two elements per weight, subtracted by a current mirror per output line.
    Differential {
        /// Size of each mirror transistor (both devices of the pair have this size).
        mirror: Transistor,
    },
}

/// Offset (common-mode) current added to every output line.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum OffsetSetting {
    /// A fixed current per line, A.
    Fixed { current_a: f64 },
    /// (1 + margin) times the most negative nominal output any input in [0, 1] can produce
    /// (0 when no output can go negative, as with the shifted encoding).
    Auto { margin: f64 },
}

impl Default for OffsetSetting {
    fn default() -> Self {
        OffsetSetting::Auto { margin: 0.1 }
    }
}

/// Nominal design of one weight stage: everything but the weight values (SI units).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct WeightStageDesign {
    pub input: InputDesign,
    pub element: ElementDesign,
    pub encoding: SignedEncoding,
    pub offset: OffsetSetting,
    /// Relative sigma of each output line's offset current source (chip draw); 0 = none.
    pub offset_sigma_rel: f64,
    /// Fraction of the element range (w_max - w_min) the largest weight is mapped onto, (0, 1].
    pub range_use: f64,
}

impl Default for WeightStageDesign {
    fn default() -> Self {
        Self {
            input: InputDesign::default(),
            element: ElementDesign::default(),
            encoding: SignedEncoding::default(),
            offset: OffsetSetting::default(),
            offset_sigma_rel: 0.0,
            range_use: 1.0,
        }
    }
}

/// Default mirror transistor for the differential encoding: NMOS, 4 µm x 4 µm.
pub fn default_mirror() -> Transistor {
    Transistor {
        polarity: Polarity::Nmos,
        w: 4e-6,
        l: 4e-6,
    }
}

impl WeightStageDesign {
    /// Check every value; the error names the parameter and its accepted range.
    pub fn validate(&self) -> Result<()> {
        self.input.validate("input")?;
        self.element.validate("element")?;
        if let SignedEncoding::Differential { mirror } = &self.encoding {
            for (n, v) in [("w", mirror.w), ("l", mirror.l)] {
                if !(v.is_finite() && v > 0.0) {
                    return Err(invalid(
                        &format!("encoding.differential.mirror.{n}"),
                        v,
                        "a finite length > 0 (m)",
                    ));
                }
            }
        }
        match self.offset {
            OffsetSetting::Fixed { current_a } => {
                check_nonneg_in("offset.fixed.current_a", current_a, "A")?
            }
            OffsetSetting::Auto { margin } => check_nonneg("offset.auto.margin", margin)?,
        }
        check_nonneg("offset_sigma_rel", self.offset_sigma_rel)?;
        if !(self.range_use.is_finite() && self.range_use > 0.0 && self.range_use <= 1.0) {
            return Err(invalid(
                "range_use",
                self.range_use,
                "greater than 0, at most 1",
            ));
        }
        Ok(())
    }

    /// Validate, then map a float weight matrix (classes x features) and bias (classes) onto
    /// element targets.
    pub fn map(&self, weights: ArrayView2<f64>, bias: ArrayView1<f64>) -> Result<MappedStage> {
        self.validate()?;
        let (classes, features) = weights.dim();
        if classes == 0 || features == 0 {
            return Err(WeightStageError::EmptyMatrix {
                name: "weights".into(),
                rows: classes,
                cols: features,
            });
        }
        if bias.len() != classes {
            return Err(WeightStageError::DimensionMismatch {
                what: "bias length vs weight rows (classes)".into(),
                expected: classes,
                got: bias.len(),
            });
        }
        let lines = features + 1;
        let mut a = Array2::<f64>::zeros((classes, lines));
        for ((j, i), &v) in weights.indexed_iter() {
            if !v.is_finite() {
                return Err(WeightStageError::NonFiniteWeight {
                    name: "weights".into(),
                    row: j,
                    col: i,
                    value: v,
                });
            }
            a[(j, i)] = v;
        }
        for (j, &v) in bias.iter().enumerate() {
            if !v.is_finite() {
                return Err(WeightStageError::NonFiniteWeight {
                    name: "bias".into(),
                    row: j,
                    col: 0,
                    value: v,
                });
            }
            a[(j, features)] = v;
        }
        let (w_min, w_max) = self.element.range();
        let span = self.range_use * (w_max - w_min);
        let (plus, minus, shift, scale) = match self.encoding {
            SignedEncoding::Shifted => {
                let shift: Vec<f64> = a
                    .columns()
                    .into_iter()
                    .map(|c| c.iter().copied().fold(f64::INFINITY, f64::min))
                    .collect();
                let mut shifted = a.clone();
                for (mut col, &c) in shifted.columns_mut().into_iter().zip(&shift) {
                    col.mapv_inplace(|v| v - c);
                }
                let m = shifted.iter().copied().fold(0.0, f64::max);
                let scale = if m > 0.0 { span / m } else { 1.0 };
                let plus = shifted.mapv(|v| w_min + scale * v);
                (plus, None, shift, scale)
            }
            SignedEncoding::Differential { .. } => {
                let m = a.iter().fold(0.0f64, |acc, v| acc.max(v.abs()));
                let scale = if m > 0.0 { span / m } else { 1.0 };
                let plus = a.mapv(|v| w_min + scale * v.max(0.0));
                let minus = a.mapv(|v| w_min + scale * (-v).max(0.0));
                (plus, Some(minus), vec![0.0; lines], scale)
            }
        };
        let iu = self.input.full_scale_current_a;
        // Nominal net weight d = w+ - w- and its most negative output over x in [0,1]^n.
        let net = match &minus {
            Some(m) => &plus - m,
            None => plus.clone(),
        };
        let worst = net
            .rows()
            .into_iter()
            .map(|r| {
                let feat: f64 = r.iter().take(features).map(|&d| d.min(0.0)).sum();
                iu * (feat + r.get(features).copied().unwrap_or(0.0))
            })
            .fold(f64::INFINITY, f64::min);
        let offset_current_a = match self.offset {
            OffsetSetting::Fixed { current_a } => current_a,
            OffsetSetting::Auto { margin } => (1.0 + margin) * (-worst).max(0.0),
        };
        Ok(MappedStage {
            design: self.clone(),
            classes,
            features,
            scale,
            shift,
            plus,
            minus,
            offset_current_a,
        })
    }
}

/// A stage design with its element targets (exact arithmetic, no nonidealities).
#[derive(Clone, Debug, PartialEq)]
pub struct MappedStage {
    pub(crate) design: WeightStageDesign,
    pub(crate) classes: usize,
    pub(crate) features: usize,
    pub(crate) scale: f64,
    pub(crate) shift: Vec<f64>,
    /// Targets of the (positive) elements, classes x (features + 1); last column = bias line.
    pub(crate) plus: Array2<f64>,
    /// Targets of the subtracted elements (differential encoding only).
    pub(crate) minus: Option<Array2<f64>>,
    pub(crate) offset_current_a: f64,
}

impl MappedStage {
    /// The stage design.
    pub fn design(&self) -> &WeightStageDesign {
        &self.design
    }
    /// Number of output lines (classes).
    pub fn outputs(&self) -> usize {
        self.classes
    }
    /// Number of feature inputs (without the bias line).
    pub fn inputs(&self) -> usize {
        self.features
    }
    /// Scale factor s from float weight units to element weight units.
    pub fn scale(&self) -> f64 {
        self.scale
    }
    /// Per-input-line shift c_i of the shifted encoding (zeros for the differential one);
    /// last entry = bias line.
    pub fn shift(&self) -> &[f64] {
        &self.shift
    }
    /// Targets of the positive elements, classes x (features + 1).
    pub fn targets_plus(&self) -> &Array2<f64> {
        &self.plus
    }
    /// Targets of the subtracted elements (differential encoding).
    pub fn targets_minus(&self) -> Option<&Array2<f64>> {
        self.minus.as_ref()
    }
    /// Nominal offset current per output line, A.
    pub fn offset_current_a(&self) -> f64 {
        self.offset_current_a
    }

    /// Nominal net weights d = w+ - w- (or w for the shifted encoding), classes x (features+1).
    pub fn net_weights(&self) -> Array2<f64> {
        match &self.minus {
            Some(m) => &self.plus - m,
            None => self.plus.clone(),
        }
    }

    /// Each input column's current per unit input on a perfect chip (element targets at their
    /// levels): the sum over output lines of |effective weight|, A; the bias line last (its
    /// entries without the offset current). The column trim's reference.
    pub fn nominal_column_currents(&self) -> Vec<f64> {
        let e = self.nominal_levels();
        let no = self.classes.max(1);
        let mut cols: Vec<f64> = e
            .matrix()
            .chunks_exact(no)
            .map(|row| row.iter().map(|m| m.abs()).sum())
            .collect();
        cols.push(
            e.offset()
                .iter()
                .map(|o| (o - self.offset_current_a).abs())
                .sum(),
        );
        cols
    }

    /// The element targets rounded to the element's programmable levels, with no other
    /// nonideality: what a perfect chip of this design holds. Linear elements: evenly spaced
    /// levels of [w_min, w_max]; subthreshold elements: evenly spaced stored voltages, i.e.
    /// evenly spaced ln(w) (dV = U_T/kappa ln w, so kappa and U_T cancel in the rounding).
    pub fn nominal_levels(&self) -> EffectiveStage {
        let round = |t: f64| match &self.design.element {
            super::element::ElementDesign::Linear(e) => e.quantise(t),
            super::element::ElementDesign::Subthreshold(e) => {
                if e.w_min > 0.0 && e.w_max > e.w_min {
                    super::element::quantise_level(
                        t.clamp(e.w_min, e.w_max).ln(),
                        e.w_min.ln(),
                        e.w_max.ln(),
                        e.levels,
                    )
                    .exp()
                } else {
                    t
                }
            }
        };
        let plus = self.plus.mapv(round);
        let minus = self.minus.as_ref().map(|m| m.mapv(round));
        let net = match &minus {
            Some(m) => &plus - m,
            None => plus,
        };
        self.effective_of(net)
    }

    /// The ideal evaluation: exact mapped weights, no DAC quantisation (inputs only clipped to
    /// [0, 1]), no mismatch, no noise, no clamping. Its argmax is the "ideal argmax".
    pub fn ideal(&self) -> EffectiveStage {
        self.effective_of(self.net_weights())
    }

    /// A noiseless effective stage holding the net weights `net` (classes x (features + 1)).
    fn effective_of(&self, net: Array2<f64>) -> EffectiveStage {
        let iu = self.design.input.full_scale_current_a;
        let mut matrix = vec![0.0; self.features * self.classes];
        for ((j, i), &d) in net.indexed_iter() {
            if i < self.features {
                if let Some(m) = matrix.get_mut(i * self.classes + j) {
                    *m = iu * d;
                }
            }
        }
        let offset = (0..self.classes)
            .map(|j| {
                self.offset_current_a + iu * net.get((j, self.features)).copied().unwrap_or(0.0)
            })
            .collect();
        EffectiveStage::new(
            self.features,
            self.classes,
            super::input::Quantiser::new(None),
            matrix,
            offset,
            None,
            vec![0.0; self.classes],
            false,
        )
    }
}
