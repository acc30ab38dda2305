//! Compiles the firmware's portable C core (firmware/core) and the in-memory test board
//! for the host, so `cargo test` checks the same C that runs on the microcontroller.

fn main() {
    let core = "../core";
    for f in ["../core/trellis.h", "../core/wire.c", "../core/session.c", "fake_board.c"] {
        println!("cargo:rerun-if-changed={f}");
    }
    cc::Build::new()
        .std("c99")
        .include(core)
        .file("../core/wire.c")
        .file("../core/session.c")
        .file("fake_board.c")
        .flag_if_supported("-Wextra")
        .flag_if_supported("-Wconversion")
        .flag_if_supported("-pedantic")
        .warnings_into_errors(true)
        .compile("trellis_core");
}
