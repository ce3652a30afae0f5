//! Weight stages: the vector-matrix multiply of the classifier, with its nonidealities.
//!
//! A stage turns an input row x in [0, 1]^n (features min-max scaled on the training split)
//! into one current per output line, `I_j = sum_i w_ji x_i I_u (+ offset)` (DEVELOPERS.md model notes
//! section 5). The four kinds of thing are kept apart:
//!
//! - **design** (nominal, serialisable, SI): [`WeightStageDesign`] = [`InputDesign`] +
//!   [`ElementDesign`] ([`LinearElement`] or [`SubthresholdElement`]) + [`SignedEncoding`] +
//!   [`OffsetSetting`]. [`WeightStageDesign::map`] places a float weight matrix and bias onto
//!   element targets: a [`MappedStage`] (whose [`MappedStage::ideal`] gives the ideal argmax).
//! - **chip**: [`MappedStage::sample_chip`] draws every static quantity (programmed values with
//!   programming error, stuck elements, drift exponents, Pelgrom mismatch, DAC gain errors,
//!   mirror pairs) from a stream the caller passes in:
//!   `rng::stream(seed, &[rng::domain::CHIP, point, chip, stage_index])`.
//! - **conditions**: [`Conditions`] (temperature, time since programming);
//!   [`WeightStageChip::effective`] folds chip and conditions into an [`EffectiveStage`] once.
//! - **sample noise**: [`EffectiveStage::forward`] adds per-decision read noise from the
//!   caller's stream only when read noise is enabled.
//!
//! Chains of stages with a hidden normaliser: [`ChainDesign`].
//!
//! Numerical core: no I/O, no printing.

pub mod chain;
pub mod effective;
pub mod element;
pub mod error;
pub mod input;
pub mod mapping;
pub mod stage;
pub mod verify;

use serde::{Deserialize, Serialize};

pub use chain::{
    random_hidden_weights, ChainChip, ChainDesign, ChainScratch, EffectiveChain,
    HiddenNonlinearity, MappedChain,
};
pub use effective::EffectiveStage;
pub use element::{
    subthreshold_weight, DriftSpec, ElementArrayChip, ElementDesign, ErrorSpec, LinearElement,
    SigmaKind, Stuck, SubthresholdElement,
};
pub use error::WeightStageError;
pub use input::{InputDesign, Quantiser, MAX_DAC_BITS};
pub use mapping::{default_mirror, MappedStage, OffsetSetting, SignedEncoding, WeightStageDesign};
pub use stage::{mirror_gain, WeightStageChip};
pub use verify::{ProgramCounts, ProgramVerify, VerifyError};

/// What a chip sees when it runs.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Conditions {
    /// Die temperature, K.
    pub temperature_k: f64,
    /// Time since the weights were programmed, s.
    pub time_since_programming_s: f64,
}

impl Default for Conditions {
    /// 300 K, 1 s after programming.
    fn default() -> Self {
        Self {
            temperature_k: 300.0,
            time_since_programming_s: 1.0,
        }
    }
}

impl Conditions {
    /// Check the values (temperature > 0 K, time >= 0 s, both finite).
    pub fn validate(&self) -> error::Result<()> {
        if !(self.temperature_k.is_finite() && self.temperature_k > 0.0) {
            return Err(WeightStageError::InvalidCondition {
                name: "temperature_k",
                value: self.temperature_k,
                accepted: "a finite temperature > 0 K",
            });
        }
        if !(self.time_since_programming_s.is_finite() && self.time_since_programming_s >= 0.0) {
            return Err(WeightStageError::InvalidCondition {
                name: "time_since_programming_s",
                value: self.time_since_programming_s,
                accepted: "a finite time >= 0 s",
            });
        }
        Ok(())
    }
}
