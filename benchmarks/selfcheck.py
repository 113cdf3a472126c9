"""Check of the two baselines against a published formula, run before any timing.

The agreement check in run.py compares the baselines with lyacomp; this one ties them to a
source outside the project, so that a shared mistake cannot pass unnoticed.
"""

from __future__ import annotations

import bench_models
import numpy as np


def planar_check() -> dict:
    """B1 and B2 against the planar formula for l1 on a field with the linear part
    [[mu, -w], [w, mu]] and known quadratic and cubic terms.

    Source: Guckenheimer & Holmes, Nonlinear Oscillations, Dynamical Systems, and Bifurcations
    of Vector Fields, Springer 1983, eq. 3.4.11 (equation number from memory, as in
    docs/mathematics.md), with l1 = 2 a / omega in lyacomp's normalization.
    """
    import lyacomp

    model = lyacomp.Model(
        name="planar_check",
        states={"x": 0.0, "y": 0.0},
        parameters={"mu": 0.0, "s": -1.0, "w": 1.7},
        equations={
            "x": "mu*x - w*y + s*x*(x**2 + y**2) + 0.3*x**2 - 0.2*x*y",
            "y": "w*x + mu*y + s*y*(x**2 + y**2) + 0.5*y**2 + 0.1*x*y",
        },
        bifurcation="mu",
    )
    params = np.array([[0.0, -1.0, 1.7], [0.0, 0.5, 2.3]])
    fxx, fxy, fyy, gxx, gxy, gyy = 0.6, -0.2, 0.0, 0.0, 0.1, 1.0
    expected = []
    for _, s, w in params:
        cubic = 6 * s + 2 * s + 2 * s + 6 * s  # f_xxx + f_xyy + g_xxy + g_yyy
        quadratic = fxy * (fxx + fyy) - gxy * (gxx + gyy) - fxx * gxx + fyy * gyy
        a = (cubic + quadratic / w) / 16.0
        expected.append(2.0 * a / w)
    base = bench_models.build_baselines(model)
    expected = np.array(expected)
    errors = {
        name: float(np.max(np.abs(solver.solve(params)["l1"] - expected) / np.abs(expected)))
        for name, solver in (("b1", base.b1), ("b2", base.b2))
    }
    return {"expected_l1": expected.tolist(), "rel_err": errors, "ok": max(errors.values()) < 1e-9}
