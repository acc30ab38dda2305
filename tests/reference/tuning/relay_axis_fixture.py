#!/usr/bin/env python3
"""Relay feedback on a servo-like axis model, sampled like servotty's host, computed offline.

Regenerate (from the repository root) with:
    python3 -m venv /tmp/pyctl && /tmp/pyctl/bin/pip install control==0.10.2 numpy scipy
    /tmp/pyctl/bin/python tests/reference/tuning/relay_axis_fixture.py

Plant (position y in mm, duty u in %): an integrating process with lag and input delay,
    tau * dv/dt = K * (u(t - theta) - u0 * sign(v)) - v,   dy/dt = v,
with Coulomb friction u0 (duty) and static friction us: at v = 0 the axis stays at rest while
|u| <= us. Linear part G(s) = K e^{-theta s} / (s (tau s + 1)).
The relay runs at a 1 ms tick: at t_k it reads the position quantised to q (floor), switches
u = +-d when the error -y passes -+eps, and the duty it sets is held from t_k (plus theta).
Each 1 ms interval is integrated by scipy.integrate.solve_ivp (rtol 1e-10) with an event at
v = 0, where the stick/slip rule decides. The record (t, position, duty) is written as CSV;
the JSON holds the parameters, the cycle the simulation settled into (period from the
switching instants of the last cycles) and the true frequency response of the linear part at
that frequency from python-control (control.frequency_response of K/(s(tau s+1)), times
e^{-j w theta}). Case "ultimate" has no friction, no quantisation and an ideal relay; its
true ultimate gain and period come from the phase crossover (scipy brentq on the exact
phase) and control.margin on a 10th-order Pade approximant of the delay.
Source of the method: K. J. Astrom and T. Hagglund, "Automatic tuning of simple regulators
with specifications on phase and amplitude margins", Automatica 20(5), 1984.
"""
import csv
import json
import pathlib

import control
import numpy as np
import scipy
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

HERE = pathlib.Path(__file__).parent
H = 0.001


def simulate(K, tau, theta, d, eps, q, u0, us, t_end):
    delay_ticks = int(round(theta / H))
    x = np.array([0.0, 0.0])  # position, velocity
    high = True
    pending = [0.0] * delay_ticks
    rows = []
    switches = []
    for k in range(int(round(t_end / H))):
        t = k * H
        y = np.floor(x[0] / q + 1e-9) * q if q > 0 else x[0]
        e = -y
        if high and e < -eps:
            high = False
            switches.append((t, -1))
        elif not high and e > eps:
            high = True
            switches.append((t, +1))
        duty = d if high else -d
        rows.append((t, y, duty))
        pending.append(duty)
        u = pending.pop(0)
        # Integrate [t, t + H) with constant u, friction by the sign of v.
        t0 = 0.0
        while t0 < H - 1e-15:
            v = x[1]
            if v == 0.0:
                if abs(u) <= us:
                    break  # stuck for the rest of the interval
                s = np.sign(u)
            else:
                s = np.sign(v)

            def f(_t, z, s=s):
                return [z[1], (K * (u - u0 * s) - z[1]) / tau]

            def stop(_t, z, s=s):
                return z[1]

            stop.terminal = True
            stop.direction = -s
            sol = solve_ivp(f, (t0, H), x, events=stop, rtol=1e-10, atol=1e-13)
            if sol.status == 1:
                x = np.array([sol.y_events[0][0][0], 0.0])
                t0 = sol.t_events[0][0]
                if u0 == 0.0 and us == 0.0:
                    # No friction: nothing holds it at zero speed; step past the crossing.
                    x[1] = 1e-12 * np.sign(K * u)
            else:
                x = sol.y[:, -1]
                t0 = H
    ups = [t for t, s in switches if s > 0]
    period = float(np.mean(np.diff(ups[-11:])))
    return rows, period


def true_response(K, tau, theta, w):
    G = control.tf([K], [tau, 1.0, 0.0])
    resp = control.frequency_response(G, [w])
    g = complex(np.asarray(resp.complex).ravel()[0]) * np.exp(-1j * w * theta)
    return abs(g), float(np.degrees(np.angle(g)) - 360.0 * (np.angle(g) > 0))


def ultimate(K, tau, theta):
    phase = lambda w: -np.pi / 2 - np.arctan(w * tau) - w * theta + np.pi
    wu = brentq(phase, 1e-3, np.pi / (2 * theta))
    ku = wu * np.sqrt(1 + (wu * tau) ** 2) / K
    num, den = control.pade(theta, 10)
    gm, _, wcg, _ = control.margin(control.tf([K], [tau, 1.0, 0.0]) * control.tf(num, den))
    return float(ku), float(2 * np.pi / wu), float(gm), float(2 * np.pi / wcg)


def main():
    cases = [
        # Demo-like axis: mm, % duty; friction, quantisation, hysteresis, one tick of delay.
        dict(name="axis", K=2.5, tau=0.025, theta=0.002, d=30.0, eps=7.5 / 24.0,
             q=1.0 / 24.0, u0=3.5, us=5.0, t_end=3.0),
        dict(name="axis_small_duty", K=2.5, tau=0.025, theta=0.002, d=12.0, eps=2.5 / 24.0,
             q=1.0 / 24.0, u0=3.5, us=5.0, t_end=3.0),
        # No friction, exact position, ideal relay: the ultimate point.
        dict(name="ultimate", K=2.5, tau=0.025, theta=0.010, d=20.0, eps=0.0,
             q=0.0, u0=0.0, us=0.0, t_end=3.0),
    ]
    out = {
        "source": "Astrom & Hagglund, Automatica 20(5), 1984 (relay feedback); values computed",
        "versions": {"control": control.__version__, "scipy": scipy.__version__,
                     "numpy": np.__version__},
        "cases": [],
    }
    for c in cases:
        rows, period = simulate(c["K"], c["tau"], c["theta"], c["d"], c["eps"], c["q"],
                                c["u0"], c["us"], c["t_end"])
        path = HERE / f"relay_{c['name']}.csv"
        with path.open("w", newline="") as f:
            w = csv.writer(f)
            w.writerow(["t", "position", "duty"])
            for t, y, u in rows:
                w.writerow([f"{t:.3f}", repr(float(y)), repr(float(u))])
        wc = 2 * np.pi / period
        gain, phase = true_response(c["K"], c["tau"], c["theta"], wc)
        case = dict(c, csv=path.name, period=period, omega=wc, true_gain=gain,
                    true_phase_deg=phase)
        if c["name"] == "ultimate":
            ku, tu, gm, tu_pade = ultimate(c["K"], c["tau"], c["theta"])
            case.update(true_ku=ku, true_tu=tu, pade_ku=gm, pade_tu=tu_pade)
        out["cases"].append(case)
        print(c["name"], period, gain, phase)
    (HERE / "relay_axis.json").write_text(json.dumps(out, indent=2) + "\n")


if __name__ == "__main__":
    main()
