//! Links to boards (in progress).
