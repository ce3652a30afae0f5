//! Circuit stages: weight stages (vector-matrix multiply) and competition stages (WTA).

pub mod competition;
pub mod weights;
