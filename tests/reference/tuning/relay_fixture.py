#!/usr/bin/env python3
"""Relay-feedback reference values for tests/tuning.rs, computed offline.

Regenerate (from the repository root) with:
    python3 -m venv /tmp/pyctl && /tmp/pyctl/bin/pip install control==0.10.2 numpy scipy
    /tmp/pyctl/bin/python tests/reference/tuning/relay_fixture.py

Plant G(s) = 1/(s+1)^3 under relay feedback u = -d*sign(y) (setpoint 0), d = 1, and the same
with a hysteresis of +-eps. The limit cycle is found two independent ways:
  1. the exact periodic solution: the state x0 at an upward zero crossing (y = -eps for the
     hysteresis relay, the switching level) satisfies x(T/2) = -x0 after half a period with
     constant u, solved with scipy.optimize.fsolve on the matrix exponential;
  2. a long event-located simulation with scipy.integrate.solve_ivp (rtol 1e-12), the last
     cycle measured.
The true ultimate gain and period come from control.margin (gain margin, phase crossover).
Source of the method: K. J. Astrom and T. Hagglund, "Automatic tuning of simple regulators
with specifications on phase and amplitude margins", Automatica 20(5), 1984.
Writes tests/reference/tuning/relay_third_order.json.
"""
import json
import pathlib

import control
import numpy as np
import scipy
from scipy.integrate import solve_ivp
from scipy.linalg import expm
from scipy.optimize import brentq, fsolve

OUT = pathlib.Path(__file__).with_name("relay_third_order.json")

# Controllable canonical state space of 1/(s+1)^3 = 1/(s^3 + 3s^2 + 3s + 1); y = x1.
A = np.array([[0.0, 1.0, 0.0], [0.0, 0.0, 1.0], [-1.0, -3.0, -3.0]])
B = np.array([0.0, 0.0, 1.0])
C = np.array([1.0, 0.0, 0.0])


def step_state(x, u, t):
    """Exact state after t with constant input u (zero-order hold via the augmented exp)."""
    M = np.zeros((4, 4))
    M[:3, :3] = A * t
    M[:3, 3] = B * t
    E = expm(M)
    return E[:3, :3] @ x + E[:3, 3] * u


def exact_cycle(d, eps):
    """Symmetric limit cycle. At t = 0 the output rises through +eps and the relay switches
    to u = -d; half a period later the output falls through -eps and the state is -x0."""

    def equations(z):
        x0 = z[:3]
        half = z[3]
        x1 = step_state(x0, -d, half)
        r = x1 + x0
        return [r[0], r[1], r[2], C @ x0 - eps]

    guess = np.array([eps, 0.15, 0.0, 1.8])
    z = fsolve(equations, guess, xtol=1e-13)
    assert np.max(np.abs(equations(z))) < 1e-12, equations(z)
    x0, half = z[:3], z[3]
    # Amplitude: the maximum of y during the half period (dy/dt = 0), located with brentq.
    sol = solve_ivp(lambda t, s: A @ s - B * d, (0.0, half), x0, rtol=1e-12, atol=1e-14,
                    dense_output=True)
    ts = np.linspace(0.0, half, 2001)
    ys = C @ sol.sol(ts)
    k = int(np.argmax(ys))
    dy = lambda t: C @ (A @ sol.sol(t) - B * d)
    lo, hi = ts[max(k - 1, 0)], ts[min(k + 1, len(ts) - 1)]
    tpk = brentq(dy, lo, hi, xtol=1e-15) if dy(lo) * dy(hi) < 0 else ts[k]
    amp = C @ sol.sol(tpk)
    return 2.0 * half, float(amp)


def simulated_cycle(d, eps, t_end=80.0):
    """Event-located simulation: u = +d until y rises through +eps, then -d until y falls
    through -eps, and so on."""
    # Half a second of u = -d first, so y starts clearly below the switching level of u = +d.
    t0, u = 0.5, d
    x = step_state(np.zeros(3), -d, t0)
    ups, tops, bottoms = [], [], []
    for _ in range(200):
        level = eps if u > 0 else -eps
        ev = lambda t, s: C @ s - level
        ev.terminal = True
        ev.direction = 1 if u > 0 else -1
        sol = solve_ivp(lambda t, s: A @ s + B * u, (t0, t_end), x, events=ev,
                        rtol=1e-12, atol=1e-14, dense_output=True)
        if sol.t_events[0].size == 0:
            break
        t1 = sol.t_events[0][0]
        yy = C @ sol.sol(np.linspace(t0, t1, 2001))
        tops.append(float(yy.max()))
        bottoms.append(float(yy.min()))
        if u > 0:
            ups.append(t1)
        # Switch, then move 1e-7 s on exactly before looking for the next event, so the
        # switching point itself (y at the level) is not found again.
        u = -u
        x = step_state(sol.y_events[0][0], u, 1e-7)
        t0 = t1 + 1e-7
    period = ups[-1] - ups[-2]
    return period, 0.5 * (max(tops[-4:]) - min(bottoms[-4:]))


def main():
    G = control.tf([1.0], [1.0, 3.0, 3.0, 1.0])
    gm, pm, wcg, wcp = control.margin(G)
    result = {
        "plant": "1/(s+1)^3",
        "source": "Astrom & Hagglund, Automatica 20(5), 1984 (relay feedback); values computed",
        "versions": {
            "control": control.__version__,
            "scipy": scipy.__version__,
            "numpy": np.__version__,
        },
        "true_ku": float(gm),
        "true_tu": float(2.0 * np.pi / wcg),
        "cases": [],
    }
    for d, eps in [(1.0, 0.0), (1.0, 0.05)]:
        period, amp = exact_cycle(d, eps)
        sim_period, sim_amp = simulated_cycle(d, eps)
        result["cases"].append({
            "d": d,
            "eps": eps,
            "period": period,
            "amplitude": amp,
            "simulated_period": sim_period,
            "simulated_amplitude": sim_amp,
            "ku_estimate": 4.0 * d / (np.pi * np.sqrt(amp * amp - eps * eps)),
        })
    OUT.write_text(json.dumps(result, indent=2) + "\n")
    print(json.dumps(result, indent=2))


if __name__ == "__main__":
    main()
