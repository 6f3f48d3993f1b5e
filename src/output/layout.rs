//! The file layout: engine and analysis results → Document. docs/hdf5-layout.md is generated from here.
