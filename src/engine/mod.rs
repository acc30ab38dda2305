//! The machine core and the per-axis tasks (in progress).
