#!/usr/bin/python3
# Prints the SciPy 1.10 values that tests/unit/integrate.cpp checks against.
# Run with Debian's /usr/bin/python3 (the one that sees python3-scipy).
import numpy as np
from scipy.integrate import solve_ivp
from scipy.integrate._ivp.rk import RK45, RK23


def decay(t, y):
    return -y


def square(t, y):
    return y * y


for method in (RK45, RK23):
    s = method(decay, 0.0, np.array([1.0]), 10.0, rtol=1e-3, atol=1e-6)
    first_h = s.h_abs
    s.step()
    sol = solve_ivp(decay, (0, 10), [1.0], method=method.__name__, rtol=1e-3, atol=1e-6)
    print(f"{method.__name__} y'=-y rtol 1e-3 atol 1e-6: first h {first_h!r}, step 1 y {s.y[0]!r}, "
          f"next h {s.h_abs!r}; to t=10: nfev {sol.nfev}, accepted {len(sol.t) - 1}, y {sol.y[0, -1]!r}")

sol = solve_ivp(decay, (10, 0), [np.exp(-10)], method="RK45", rtol=1e-6, atol=1e-12)
print(f"RK45 y'=-y from t=10 to 0, rtol 1e-6 atol 1e-12: nfev {sol.nfev}, accepted {len(sol.t) - 1}, "
      f"y(0) {sol.y[0, -1]!r}")

for method in ("RK45", "RK23"):
    sol = solve_ivp(square, (0, 2), [1.0], method=method, rtol=1e-6, atol=1e-9)
    print(f"{method} y'=y^2 to t=2, rtol 1e-6 atol 1e-9: status {sol.status} ({sol.message}), "
          f"nfev {sol.nfev}, accepted {len(sol.t) - 1}")
