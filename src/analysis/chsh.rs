//! CHSH: correlations per setting pair, S and its uncertainty and significance.
