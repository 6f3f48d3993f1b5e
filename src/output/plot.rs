//! Plots (plotters): delay histograms, window sweeps, correlations, visibility fits; PNG or SVG by extension.
