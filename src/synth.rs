//! Invented cells, made by deterministic generators (see sample_cells/README.md).
