"""Exception classes: one base, one subclass per pipeline stage.

User-input problems (a bad model, a missing compiler) and internal bugs are kept
apart: everything deriving from :class:`LyacompError` is something the user can fix
by acting on the message; :class:`InternalError` means lyacomp itself is wrong.
"""

from __future__ import annotations


class LyacompError(Exception):
    """Base class of every error lyacomp raises on purpose."""


class ModelError(LyacompError):
    """The model is not usable.

    Usual causes: an unknown name in an expression, a state without an equation,
    a duplicated name, cyclic definitions, a non-smooth function, a syntax error.
    The message names the offending key (and file, when read from one).
    """


class DelayError(ModelError):
    """A delayed state ``x(t - tau)`` the delay-equation analysis cannot take.

    Usual causes: the delay depends on a state (state-dependent delays are not
    covered), it is negative or zero at the nominal parameter values, or something
    other than a state is delayed.
    """


class DerivationError(LyacompError):
    """Symbolic derivation failed (e.g. a derivative that sympy cannot form)."""


class CodegenError(LyacompError):
    """The model produced an expression that cannot be printed as C."""


class CompilerNotFoundError(LyacompError):
    """No working C compiler was found on this machine."""


class BuildError(LyacompError):
    """The C compiler rejected the generated source.

    Carries the command, the compiler output and the path of the source kept for
    inspection.
    """

    def __init__(self, message: str, command: str = "", output: str = "", source: str = ""):
        super().__init__(message)
        self.command = command
        self.output = output
        self.source = source


class CacheLockTimeout(LyacompError):
    """Another process held the build lock of this model for too long."""


class EvaluationError(LyacompError):
    """Bad arguments to an evaluator: unknown parameter, wrong shape, bad option."""


class StudyError(LyacompError):
    """A study (Monte Carlo, optimization, map, simulation) was set up wrongly."""


class DegeneratePointError(LyacompError):
    """The degenerate Hopf point (l1 = 0) along a second parameter was not found.

    Usual causes: l1 does not change sign near the starting value, the Hopf point is
    lost on the way (the message names the evaluation status), or l1 does not depend on
    that parameter.
    """


class InternalError(Exception):
    """A bug in lyacomp; please report it with the model that triggered it."""
