//! Host work per telemetry frame: the whole simulated machine (axis tasks, protocol, board
//! emulation and plant) run for one second of simulated time with the axes holding, under
//! tokio's paused clock so that only CPU time is measured.
//!
//! One iteration = 8 axes × 1000 frames; divide the time by 8000 for the cost of one frame
//! round trip (engine + simulated board). The link bar itself is measured over real PTYs with
//! `servotty linktest` (docs/performance.md).

use std::time::Duration;

use criterion::{criterion_group, criterion_main, Criterion};
use servotty::config::MachineConfig;
use servotty::engine::{AxisCommand, Machine};

fn bench_config() -> MachineConfig {
    let text = std::fs::read_to_string(
        std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("configs/bench-8-axes.toml"),
    )
    .expect("bench config");
    MachineConfig::from_toml_str(&text, "bench").expect("valid")
}

fn one_simulated_second(c: &mut Criterion) {
    let cfg = bench_config();
    let rt = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .start_paused(true)
        .build()
        .expect("runtime");
    let (machine, h) = rt.block_on(async {
        let m = Machine::start(&cfg, &[]).expect("starts");
        let h = m.handle();
        assert!(h.wait_linked(Duration::from_secs(2)).await.is_empty());
        for a in h.axes() {
            a.send(AxisCommand::Enable).await.expect("enable");
        }
        (m, h)
    });
    let mut group = c.benchmark_group("engine");
    group.sample_size(20);
    group.bench_function("8 axes x 1000 frames, holding", |b| {
        b.iter(|| rt.block_on(async { tokio::time::sleep(Duration::from_secs(1)).await }));
    });
    group.finish();
    drop(h);
    rt.block_on(machine.shutdown());
}

criterion_group!(benches, one_simulated_second);
criterion_main!(benches);
