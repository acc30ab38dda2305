//! Board emulation (in progress).
