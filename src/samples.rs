//! The invented sample cells shipped in sample_cells/ and embedded in the binary.
