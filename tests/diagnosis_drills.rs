//! Fault drills on `servotty sim --pty`'s standard input: each command is answered on
//! standard error and reaches the simulated board; bad commands are refused with the list.
//! Real binary and real pipes, so this polls under a generous deadline.

use std::io::{BufRead, BufReader, Write};
use std::process::{Child, Command, Stdio};
use std::sync::mpsc;
use std::time::Duration;

struct KillOnDrop(Child);

impl Drop for KillOnDrop {
    fn drop(&mut self) {
        let _ = self.0.kill();
        let _ = self.0.wait();
    }
}

#[test]
fn drills_typed_on_standard_input_are_answered() {
    let mut sim = KillOnDrop(
        Command::new(env!("CARGO_BIN_EXE_servotty"))
            .args(["sim", "--pty"])
            .stdin(Stdio::piped())
            .stdout(Stdio::piped())
            .stderr(Stdio::piped())
            .spawn()
            .expect("sim starts"),
    );
    let mut out = BufReader::new(sim.0.stdout.take().expect("stdout")).lines();
    // The device lines come first: the boards are up.
    for _ in 0..3 {
        out.next().expect("a device line").expect("utf-8");
    }
    let (tx, rx) = mpsc::channel();
    let err = sim.0.stderr.take().expect("stderr");
    std::thread::spawn(move || {
        for l in BufReader::new(err).lines().map_while(Result::ok) {
            let _ = tx.send(l);
        }
    });
    let mut stdin = sim.0.stdin.take().expect("stdin");
    let mut ask = |cmd: &str, want: &str| {
        writeln!(stdin, "{cmd}").expect("write");
        stdin.flush().expect("flush");
        loop {
            let l = rx.recv_timeout(Duration::from_secs(60)).expect("an answer in time");
            if l.contains(want) {
                return l;
            }
        }
    };
    ask("jam x", "drill: x: jammed where it is");
    ask("blackout y 70", "drill: y: link dark for 70 ms");
    ask("slip z 0.3", "drill: z: belt slips 30 %");
    ask("jam x at 300", "drill: x: will jam at 300 mm on its rail");
    ask("sag y 0.5", "drill: y: supply sags 50 %");
    ask("fault z", "drill: z: driver stage reports a fault");
    let refused = ask("fly x", "drill refused");
    assert!(refused.contains("jam AXIS"), "{refused}");
    ask("jam q", "no simulated axis \"q\"");
    ask("clear all", "drill: z: drill faults off");
}
