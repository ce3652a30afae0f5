//! Plots (SVG) and the self-contained HTML report of a results folder.
