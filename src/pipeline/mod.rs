//! The classifier on a chip: trained weights mapped onto stages, one chip forward pass, per-chip metrics.
