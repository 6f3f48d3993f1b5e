//! HDF5 writer: groups, column datasets with `units` attributes, deflate on large arrays.
