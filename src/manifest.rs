//! The run manifest: inputs, channel roles, delays, window and analyzer settings of each block (TOML, our schema).
