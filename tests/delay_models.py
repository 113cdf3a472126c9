"""Random delay models with a Hopf point by construction, written twice: as lyacomp model
text (``x0(t - tau1)``) and in the notation of tests/reference/mp_delay.py (``x0__1``).

The linear part is built so that ``Delta(i w) q = 0`` holds at mu = 1 for a random w, q
and delays: A0 q = i w q - sum_k A_k e^{-i w tau_k} q, solved for a real A0 (for three
states one more random pair A0 v = u fixes it). The nonlinear terms (products,
tanh(u) - u, exp(u) - 1 - u, cubes, with delayed arguments) vanish to first order at 0;
(mu - 1) times a constant moves the equilibrium with mu.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

import lyacomp


@dataclass(frozen=True)
class RandomDelayModel:
    states: list[str]
    params: dict[str, float]
    equations: dict[str, str]  # lyacomp text
    delays: list[str]  # tau_k as text over the parameters
    omega: float
    blocks: list[np.ndarray]  # A0, A1, ... at mu = 1

    def reference_rhs(self) -> list[str]:
        """The equations in the reference notation: state(t - DELAY_k) -> state__k."""
        out = []
        for s in self.states:
            text = self.equations[s]
            for k, tau in enumerate(self.delays, start=1):
                text = text.replace(f"(t - ({tau}))", f"__{k}")
            out.append(text)
        return out


def _num(v: float) -> str:
    return repr(float(v))


def random_delay_model(seed: int, n: int, two_delays: bool) -> RandomDelayModel:
    rng = np.random.default_rng(seed)
    states = [f"x{j}" for j in range(n)]
    omega = rng.uniform(0.6, 1.8)
    tau1 = rng.uniform(0.4, 1.4)
    params = {"mu": 1.0, "tau1": tau1}
    delays = ["tau1"]
    taus = [tau1]
    if two_delays:
        params["dt"] = rng.uniform(0.3, 0.9)
        delays.append("tau1 + dt")
        taus.append(tau1 + params["dt"])
    lagged = [rng.normal(0.0, 0.6, (n, n)) for _ in taus]
    q = rng.normal(size=n) + 1j * rng.normal(size=n)
    target = 1j * omega * q - sum(a @ q * np.exp(-1j * omega * t) for a, t in zip(lagged, taus))
    cols, rhs = [q.real, q.imag], [target.real, target.imag]
    if n == 3:
        cols.append(rng.normal(size=n))
        rhs.append(rng.normal(size=n))
    a0 = np.column_stack(rhs) @ np.linalg.inv(np.column_stack(cols))
    force = rng.normal(0.0, 0.5, n)
    eqs = {}
    for i, s in enumerate(states):
        terms = [f"{_num(a0[i, j])}*{states[j]}" for j in range(n)]
        for k, (a, tau) in enumerate(zip(lagged, delays)):
            # The first delayed block carries mu: the feedback gain is the bifurcation
            # parameter (mu = 1 at the Hopf point by construction).
            gain = "mu*" if k == 0 else ""
            terms += [f"{gain}{_num(a[i, j])}*{states[j]}(t - ({tau}))" for j in range(n)]
        a_, b_, c_ = (states[int(v)] for v in rng.integers(0, n, 3))
        lag = f"(t - ({delays[-1]}))"
        first = f"(t - ({delays[0]}))"
        c = rng.normal(0.0, 0.5, 6)
        terms += [
            f"{_num(c[0])}*{a_}*{b_}{lag}",
            f"{_num(c[1])}*(tanh({c_}{first}) - {c_}{first})",
            f"{_num(c[2])}*(exp({b_}{first}) - 1 - {b_}{first})",
            f"{_num(c[3])}*{a_}**2*{c_}",
            f"{_num(c[4])}*{b_}{first}*{c_}{lag}**2",
            f"{_num(c[5])}*{a_}*{b_}",
            f"{_num(force[i])}*(mu - 1)",
        ]
        eqs[s] = " + ".join(terms)
    return RandomDelayModel(states, params, eqs, delays, omega, [a0, *lagged])


def as_lyacomp_text(model: RandomDelayModel) -> dict[str, str]:
    """The equations exactly as lyacomp reads them (the delay text in parentheses)."""
    return {s: re.sub(r"\s+", " ", e) for s, e in model.equations.items()}


def wright_model(name: str, parameters: dict[str, float], delay: str = "tau", **extra):
    """Wright's equation x' = -r x(t - delay) (1 + x) as a lyacomp model (its Hopf points of
    x = 0 at r delay = pi/2 + 2 pi k, omega = r; Hassard, Kazarinoff & Wan, Theory and
    Applications of Hopf Bifurcation, Cambridge 1981, for the first)."""
    return lyacomp.Model(
        name=name,
        states={"x": 0.0},
        parameters=parameters,
        equations={"x": f"-r * x(t - {delay}) * (1 + x)"},
        **extra,
    )
