//! Headless subcommands (in progress).
