"""Outcome codes shared by the generated C and the Python shim."""

from __future__ import annotations

from enum import IntEnum


class Status(IntEnum):
    """Why an evaluation did or did not produce numbers.

    The integer values are part of the generated C interface.
    """

    OK = 0
    NO_CONVERGENCE = 1  # Newton (equilibrium or Hopf point) did not converge
    NEUTRAL_SADDLE = 2  # the critical pair is real (+-k): trace condition without oscillation
    NO_OSCILLATORY_PAIR = 3  # no complex eigenvalue pair to follow
    ZERO_EIGENVALUE = 4  # an eigenvalue at zero (A singular): fold or Bogdanov-Takens type
    ZERO_TRANSVERSALITY = 5  # the pair crosses the axis with zero speed
    NONFINITE_INPUT = 6  # a parameter or guess is NaN or infinite
    NONFINITE_RESULT = 7  # arithmetic overflowed or left the model's domain
    NOT_CRITICAL = 8  # no bifurcation parameter and the given point is not at onset
    RESONANCE = 9  # 2 i omega is also an eigenvalue (1:2 resonance)
    EXTRA_CRITICAL_EIGENVALUE = 10  # more eigenvalues on the imaginary axis, or a non-simple pair
    NONPOSITIVE_DELAY = 11  # a delay of the model is zero or negative at these parameters

    @property
    def label(self) -> str:
        return self.name.lower()

    @property
    def delay_only(self) -> bool:
        """Reached only by delay models (the ODE kernel does not list it)."""
        return self is Status.NONPOSITIVE_DELAY

    @property
    def explanation(self) -> str:
        return _EXPLANATIONS[self]


_EXPLANATIONS = {
    Status.OK: "the Hopf point was found and l1 computed",
    Status.NO_CONVERGENCE: (
        "Newton's method did not converge to a Hopf point from the starting guess; this "
        "alone does not tell whether one exists (lyacomp eval scans the bifurcation "
        "parameter to tell); if one does, a starting guess nearer to it reaches it"
    ),
    Status.NEUTRAL_SADDLE: (
        "the trace condition holds but the pair is real (+-k): a neutral saddle, not a Hopf point"
    ),
    Status.NO_OSCILLATORY_PAIR: (
        "the Jacobian at the starting point has no complex eigenvalue pair; start closer to onset"
    ),
    Status.ZERO_EIGENVALUE: (
        "the Jacobian has a zero eigenvalue at the point (fold or Bogdanov-Takens type degeneracy)"
    ),
    Status.ZERO_TRANSVERSALITY: (
        "the eigenvalue pair touches the imaginary axis without crossing it (transversality d = 0)"
    ),
    Status.NONFINITE_INPUT: "a parameter value or starting guess is NaN or infinite",
    Status.NONFINITE_RESULT: (
        "the computation produced NaN or infinity (outside the model's domain?)"
    ),
    Status.NOT_CRITICAL: (
        "the point is not at onset (the critical pair is off the imaginary axis): without "
        "a [bifurcation] parameter the given point itself must be the Hopf point; with a "
        "closed-form critical value, that value does not put the equilibrium at onset"
    ),
    Status.RESONANCE: "2*i*omega is also an eigenvalue (1:2 resonance); l1 is not defined",
    Status.NONPOSITIVE_DELAY: (
        "a delay tau of the model is zero or negative at these parameter values (or at the "
        "critical value found); the delay-equation analysis needs tau > 0"
    ),
    Status.EXTRA_CRITICAL_EIGENVALUE: (
        "further eigenvalues lie on the imaginary axis or the pair is not simple; "
        "l1 alone does not decide the onset"
    ),
}


class Criticality(IntEnum):
    """The kind of onset. Codes are part of the generated C interface."""

    UNDEFINED = 0
    SUPERCRITICAL = 1
    SUBCRITICAL = 2
    DEGENERATE = 3

    @property
    def label(self) -> str | None:
        return None if self is Criticality.UNDEFINED else self.name.lower()
