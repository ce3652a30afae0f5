//! Competition stages: current-mode WTA, multi-input differential pair, decisions.
