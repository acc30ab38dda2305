#!/usr/bin/env python3
"""Step-response fixtures for tests/control.rs, computed offline with python-control.

Regenerate (from the repository root) with:
    python3 -m venv /tmp/pyctl && /tmp/pyctl/bin/pip install control==0.10.2 numpy scipy
    /tmp/pyctl/bin/python tests/reference/control/step_info_fixtures.py

Writes tests/reference/control/step_info.json: for each system its transfer function, the
sampled unit-step response (uniform grid: t0, dt, n, y) and control.step_info() on that same
grid. python-control picks samples (no interpolation) and uses a band around the final value
(the DC gain here); servotty interpolates and uses a band around the commanded step. All
systems below have unit DC gain, so the two definitions differ only by the sampling.
"""
import json
import pathlib

import control
import numpy as np
import scipy

OUT = pathlib.Path(__file__).with_name("step_info.json")


def second_order(zeta, wn):
    return control.tf([wn * wn], [1.0, 2.0 * zeta * wn, wn * wn])


def motor_position_loop():
    # DC Motor Position model (University of Michigan, Control Tutorials for MATLAB and
    # Simulink, "DC Motor Position: System Modeling"), unity feedback with C = Kp = 1.
    J, b, K, R, L = 3.2284e-6, 3.5077e-6, 0.0274, 4.0, 2.75e-6
    s = control.tf("s")
    plant = K / (s * ((J * s + b) * (L * s + R) + K * K))
    return control.feedback(plant, 1)


CASES = [
    # name, system, end time, samples, source of the system
    ("ogata_zeta0.2_wn10", second_order(0.2, 10.0), 4.0, 401,
     "K. Ogata, Modern Control Engineering, 5th ed., 2010, sec. 5-3 (standard second order)"),
    ("ogata_zeta0.6_wn5", second_order(0.6, 5.0), 3.0, 301,
     "K. Ogata, Modern Control Engineering, 5th ed., 2010, sec. 5-3 (standard second order)"),
    ("ogata_p177_zeta0.456_wn3.53", second_order(0.456, 3.53), 6.0, 601,
     "K. Ogata, Modern Control Engineering, 5th ed., 2010, p. 177 worked example"),
    ("nonminimum_phase_docstring", control.tf([-1.0, 1.0], [1.0, 1.0, 1.0]), None, None,
     "python-control 0.10.2 step_info docstring example (default time grid)"),
    ("first_order_tau0.5", control.tf([1.0], [0.5, 1.0]), 5.0, 501,
     "first-order lag, 10-90 % rise = tau*ln 9 (common practice)"),
    ("motor_position_kp1", motor_position_loop(), 0.4, 801,
     "UMich Control Tutorials, DC Motor Position, unity feedback Kp = 1"),
]


def main():
    out = {
        "generator": "tests/reference/control/step_info_fixtures.py",
        "versions": {
            "control": control.__version__,
            "numpy": np.__version__,
            "scipy": scipy.__version__,
        },
        "cases": [],
    }
    for name, sys, t_end, n, source in CASES:
        if t_end is None:
            t, y = control.step_response(sys)
        else:
            t, y = control.step_response(sys, np.linspace(0.0, t_end, n))
        t = np.asarray(t)
        y = np.asarray(y).reshape(-1)
        dt = float(t[1] - t[0])
        assert np.allclose(np.diff(t), dt, rtol=1e-9, atol=0.0), "grid must be uniform"
        info = control.step_info(sys, t)
        out["cases"].append({
            "name": name,
            "source": source,
            "num": [float(c) for c in np.asarray(sys.num[0][0])],
            "den": [float(c) for c in np.asarray(sys.den[0][0])],
            "t0": float(t[0]),
            "dt": dt,
            "n": int(len(t)),
            "y": [float(f"{v:.12g}") for v in y],
            "step_info": {k: float(v) for k, v in info.items()},
        })
    OUT.write_text(json.dumps(out, separators=(",", ":")) + "\n")
    print(f"wrote {OUT} ({OUT.stat().st_size} bytes)")


if __name__ == "__main__":
    main()
