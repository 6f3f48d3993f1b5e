//! CSV writer: one table after another, attributes as comment lines.
