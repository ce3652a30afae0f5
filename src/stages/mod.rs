//! Circuit stages: weight stages (vector-matrix multiply) and competition stages (WTA).
