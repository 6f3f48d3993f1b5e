//! Provenance: tool version, command line, UTC time, parameters, and each input's path, size and checksum.
