"""The benchmark models (M1-M4), their samples, and the two baselines built on them."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
from b1_numpy import VectorizedHopf
from b2_loop import LoopHopf
from ring import ring_toml
from symbolic import derive

MODEL_DIR = Path(__file__).with_name("models")
FILES = {
    "M1": "m1_pilot_valve.toml",
    "M2": "m2_towed_sensor.toml",
    "M3": "m3_servo_integral.toml",
}
RING_SIZES = (4, 8, 16, 32, 64)
SPREAD = 0.05
"""Every parameter except the bifurcation parameter is drawn uniformly within +-5 % of nominal."""


def model_path(label: str, workdir: Path) -> Path:
    """Path of model ``M1``..``M3`` or ``M4-n`` (the ring TOML is written into ``workdir``)."""
    if label in FILES:
        return MODEL_DIR / FILES[label]
    n = int(label.split("-")[1])
    path = workdir / f"m4_ring_{n}.toml"
    if not path.exists():
        path.write_text(ring_toml(n))
    return path


def uncertainty_table(model) -> dict:
    """The sampling law in the form of a model's [uncertainty] table (for the robustness run)."""
    table = {}
    for name in model.parameter_names:
        if name == model.bifurcation:
            continue
        nominal = model.nominal[name]
        low, high = sorted((nominal * (1 - SPREAD), nominal * (1 + SPREAD)))
        table[name] = {"distribution": "uniform", "low": low, "high": high}
    return table


def draw_samples(model, count: int, seed: int) -> np.ndarray:
    """(count, m) parameter samples in model order; the bifurcation column keeps its guess."""
    rng = np.random.default_rng(seed)
    nominal = np.array([model.nominal[k] for k in model.parameter_names])
    factors = 1.0 + SPREAD * rng.uniform(-1.0, 1.0, size=(count, len(nominal)))
    samples = nominal * factors
    samples[:, model.parameter_names.index(model.bifurcation)] = model.nominal[model.bifurcation]
    return samples


def batch_inputs(model, samples: np.ndarray) -> dict[str, np.ndarray]:
    """Contiguous columns for ``Evaluator.batch``; the bifurcation parameter is left out."""
    return {
        name: np.ascontiguousarray(samples[:, i])
        for i, name in enumerate(model.parameter_names)
        if name != model.bifurcation
    }


@dataclass
class Baselines:
    b1: VectorizedHopf
    b2: LoopHopf


def build_baselines(model) -> Baselines:
    """B1 and B2 from lyacomp's own symbolic model, each solved once at the nominal point."""
    sym = model.symbolic()
    hs = derive(sym.states, sym.parameters, sym.rhs, model.bifurcation)
    closed = None
    if sym.critical_value is not None and sym.equilibrium is not None:
        closed = {"critical_value": sym.critical_value, "equilibrium": list(sym.equilibrium)}
    nominal = np.array([model.nominal[k] for k in model.parameter_names])
    guess = np.array([model.state_guess[k] for k in model.state_names])
    mu_guess = float(model.guess) if model.guess is not None else model.nominal[model.bifurcation]
    b1, b2 = VectorizedHopf(hs, closed), LoopHopf(hs, closed)
    b1.prepare(nominal, guess, mu_guess)
    b2.prepare(nominal, guess, mu_guess)
    return Baselines(b1, b2)
