//! Datasets: the shipped open datasets and user CSV files; stratified split; scaling.
