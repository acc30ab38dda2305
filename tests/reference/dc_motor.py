#!/usr/bin/env python3
"""Reference values for tests/plant.rs (DC motor checks).

Generated with: Python 3.11.7, python-control 0.10.2, scipy 1.17.1, numpy 2.4.6.
Run: python3 tests/reference/dc_motor.py > tests/reference/dc_motor.txt

Model and parameters: University of Michigan, Control Tutorials for MATLAB and Simulink,
"DC Motor Speed: System Modeling" and "DC Motor Position: System Modeling":
    V = R i + L di/dt + K w,   J dw/dt = K i - b w,   dtheta/dt = w.
"""
import numpy as np
import scipy
import scipy.signal
import control as ct


def motor_ss(J, b, K, R, L):
    # states (i, w, theta), input V, outputs (i, w, theta)
    A = np.array([[-R / L, -K / L, 0.0], [K / J, -b / J, 0.0], [0.0, 1.0, 0.0]])
    B = np.array([[1.0 / L], [0.0], [0.0]])
    return A, B


def band_settling(t, y, final, band):
    """Last time |y - final| crosses band*final, linearly interpolated."""
    err = np.abs(y - final) - band * abs(final)
    outside = np.nonzero(err > 0)[0]
    if len(outside) == 0:
        return 0.0
    k = outside[-1]
    if k + 1 >= len(t):
        return float("nan")
    # interpolate between k (outside) and k+1 (inside)
    return t[k] + (t[k + 1] - t[k]) * err[k] / (err[k] - err[k + 1])


print("# versions: python-control %s, scipy %s, numpy %s" % (ct.__version__, scipy.__version__, np.__version__))

# --- speed model ---------------------------------------------------------------
J, b, K, R, L = 0.01, 0.1, 0.01, 1.0, 0.5
s = ct.tf("s")
P = K / ((J * s + b) * (L * s + R) + K**2)
print("speed.poles", " ".join("%.9g" % p.real for p in sorted(ct.poles(P).real)))
print("speed.dc_gain %.9g" % ct.dcgain(P))
T = np.array([0.1, 0.5, 1.0, 2.0])
_, w = ct.step_response(P, T=np.linspace(0, 2.0, 20001))
tt = np.linspace(0, 2.0, 20001)
print("speed.step", " ".join("%.9g" % np.interp(x, tt, w) for x in T))
tau1 = R * J / (R * b + K**2)
print("speed.first_order_tau %.9g" % tau1)

# --- position model, unity feedback with C = Kp = 1 -----------------------------
J, b, K, R, L = 3.2284e-6, 3.5077e-6, 0.0274, 4.0, 2.75e-6
Pp = K / (s * ((J * s + b) * (L * s + R) + K**2))
Tcl = ct.feedback(1 * Pp, 1)
t = np.linspace(0, 0.5, 500001)
_, y = ct.step_response(Tcl, T=t)
print("position.continuous.overshoot_pct %.6g" % (100 * (y.max() - 1.0)))
print("position.continuous.settling_2pct %.6g" % band_settling(t, y, 1.0, 0.02))

# Same loop as the Rust test runs it: the plant is held (ZOH) over h = 10 us and the
# controller V_k = 1 - theta_k acts on samples.
h = 1e-5
A, B = motor_ss(J, b, K, R, L)
Ad, Bd, _, _, _ = scipy.signal.cont2discrete((A, B, np.eye(3), np.zeros((3, 1))), h, method="zoh")
x = np.zeros(3)
n = 50000
th = np.empty(n + 1)
th[0] = 0.0
for k in range(n):
    v = 1.0 * (1.0 - x[2])
    x = Ad @ x + Bd[:, 0] * v
    th[k + 1] = x[2]
td = np.arange(n + 1) * h
print("position.zoh10us.overshoot_pct %.6g" % (100 * (th.max() - 1.0)))
print("position.zoh10us.settling_2pct %.6g" % band_settling(td, th, 1.0, 0.02))
