"""Safe translation of expression strings into sympy, without eval or sympify.

Python's own parser builds the syntax tree; a whitelist walk turns it into sympy.
Declared names always mean the user's symbols, so engineers can call a parameter
``E``, ``I``, ``S``, ``beta`` or even ``lambda``.
"""

from __future__ import annotations

import ast
import io
import keyword
import tokenize
from collections.abc import Callable, Mapping

import sympy as sp

from ..errors import ModelError

# Smooth elementary functions: name -> (arity, builder).
_SMOOTH: dict[str, tuple[int, Callable[..., sp.Expr]]] = {
    "exp": (1, sp.exp),
    "log": (1, sp.log),
    "ln": (1, sp.log),
    "log10": (1, lambda a: sp.log(a) / sp.log(10)),
    "log2": (1, lambda a: sp.log(a) / sp.log(2)),
    "sqrt": (1, sp.sqrt),
    "pow": (2, lambda a, b: a**b),
    "hypot": (2, lambda a, b: sp.sqrt(a**2 + b**2)),
    "sin": (1, sp.sin),
    "cos": (1, sp.cos),
    "tan": (1, sp.tan),
    "asin": (1, sp.asin),
    "acos": (1, sp.acos),
    "atan": (1, sp.atan),
    "atan2": (2, sp.atan2),
    "sinh": (1, sp.sinh),
    "cosh": (1, sp.cosh),
    "tanh": (1, sp.tanh),
    "asinh": (1, sp.asinh),
    "acosh": (1, sp.acosh),
    "atanh": (1, sp.atanh),
    "erf": (1, sp.erf),
    "erfc": (1, sp.erfc),
}

# Functions users reach for that have a kink or jump somewhere.
_NON_SMOOTH = {
    "abs",
    "Abs",
    "fabs",
    "sign",
    "sgn",
    "signum",
    "min",
    "max",
    "Min",
    "Max",
    "floor",
    "ceil",
    "round",
    "trunc",
    "mod",
    "fmod",
    "Heaviside",
    "heaviside",
    "step",
    "Piecewise",
    "piecewise",
    "where",
    "ifelse",
    "clip",
    "relu",
    "sat",
    "saturate",
}

_SMOOTHNESS_NOTE = (
    "the first Lyapunov coefficient uses derivatives of the vector field up to third order "
    "at the equilibrium, so the model must be smooth (three times differentiable); replace it "
    "by a smooth approximation such as sqrt(x**2 + eps**2) for |x| or tanh(x/eps) for sign(x)"
)

KEYWORD_PREFIX = "_kw_"


def _protect_keywords(text: str, where: str, declared: Mapping[str, object]) -> str:
    """Rename declared names that are Python keywords so that ``ast`` can parse them.

    Undeclared keywords stay, so that ``x if c else y`` is reported as a conditional.
    """
    try:
        tokens = list(tokenize.generate_tokens(io.StringIO(text).readline))
    except (tokenize.TokenError, SyntaxError, IndentationError) as exc:
        why = exc.args[0] if exc.args else exc
        raise ModelError(f"{where}: syntax error in {text!r} ({why})") from None
    lines = text.splitlines(keepends=True) or [""]
    offsets = [0]
    for line in lines:
        offsets.append(offsets[-1] + len(line))
    edits = []
    for tok in tokens:
        if tok.type == tokenize.NAME and keyword.iskeyword(tok.string) and tok.string in declared:
            start = offsets[tok.start[0] - 1] + tok.start[1]
            end = offsets[tok.end[0] - 1] + tok.end[1]
            edits.append((start, end, KEYWORD_PREFIX + tok.string))
    for start, end, repl in reversed(edits):
        text = text[:start] + repl + text[end:]
    return text


def _user_name(node_id: str) -> str:
    return node_id[len(KEYWORD_PREFIX) :] if node_id.startswith(KEYWORD_PREFIX) else node_id


class _Translator:
    def __init__(self, symbols: Mapping[str, sp.Expr], where: str, text: str):
        self.symbols = symbols
        self.where = where
        self.text = text

    def fail(self, node: ast.AST | None, why: str) -> ModelError:
        col = getattr(node, "col_offset", None)
        at = f" (at column {col + 1})" if col is not None else ""
        return ModelError(f"{self.where}: {why}{at} in {self.text!r}")

    def visit(self, node: ast.AST) -> sp.Expr:
        method = getattr(self, "visit_" + type(node).__name__, None)
        if method is None:
            raise self.fail(node, self._describe_unsupported(node))
        return method(node)

    @staticmethod
    def _describe_unsupported(node: ast.AST) -> str:
        if isinstance(node, (ast.Compare, ast.IfExp, ast.BoolOp)):
            return "comparisons and conditionals are not allowed: " + _SMOOTHNESS_NOTE
        if isinstance(node, (ast.Attribute, ast.Subscript)):
            return "attribute access and indexing are not allowed"
        if isinstance(node, ast.Lambda):
            return "lambda expressions are not allowed"
        return f"unsupported syntax ({type(node).__name__})"

    def visit_Expression(self, node: ast.Expression) -> sp.Expr:
        return self.visit(node.body)

    def visit_Constant(self, node: ast.Constant) -> sp.Expr:
        value = node.value
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise self.fail(node, f"only real numbers are allowed as constants, not {value!r}")
        if isinstance(value, int):
            return sp.Integer(value)
        if value != value or value in (float("inf"), float("-inf")):
            raise self.fail(node, "non-finite constant")
        # The shortest round-trip decimal keeps derivatives exact (0.1 -> 1/10).
        return sp.Rational(repr(value))

    def visit_Name(self, node: ast.Name) -> sp.Expr:
        name = _user_name(node.id)
        if name in self.symbols:
            return self.symbols[name]
        if name == "pi":
            return sp.pi
        if name in _SMOOTH or name in _NON_SMOOTH:
            raise self.fail(node, f"{name!r} is a function; call it with parentheses")
        raise self.fail(
            node, f"unknown name {name!r} (declare it as a state, parameter or definition)"
        )

    def visit_UnaryOp(self, node: ast.UnaryOp) -> sp.Expr:
        operand = self.visit(node.operand)
        if isinstance(node.op, ast.USub):
            return -operand
        if isinstance(node.op, ast.UAdd):
            return operand
        raise self.fail(node, f"unsupported unary operator {type(node.op).__name__}")

    def visit_BinOp(self, node: ast.BinOp) -> sp.Expr:
        op = node.op
        if isinstance(op, ast.BitXor):
            raise self.fail(node, "'^' is not a power here; write x**2")
        left, right = self.visit(node.left), self.visit(node.right)
        if isinstance(op, ast.Add):
            return left + right
        if isinstance(op, ast.Sub):
            return left - right
        if isinstance(op, ast.Mult):
            return left * right
        if isinstance(op, ast.Div):
            if right == 0:
                raise self.fail(node, "division by zero")
            return left / right
        if isinstance(op, ast.Pow):
            return left**right
        if isinstance(op, ast.Mod):
            raise self.fail(node, "'%' (modulo) is not allowed: " + _SMOOTHNESS_NOTE)
        raise self.fail(node, f"unsupported operator {type(op).__name__}")

    def visit_Call(self, node: ast.Call) -> sp.Expr:
        if not isinstance(node.func, ast.Name):
            raise self.fail(node, "only plain function calls such as exp(x) are allowed")
        name = _user_name(node.func.id)
        if node.keywords:
            raise self.fail(node, f"{name}() takes no keyword arguments")
        if name in self.symbols:
            raise self.fail(node, f"{name!r} is a declared symbol, not a function")
        if name in _NON_SMOOTH:
            raise self.fail(node, f"{name}() is not smooth: " + _SMOOTHNESS_NOTE)
        if name not in _SMOOTH:
            allowed = ", ".join(sorted(_SMOOTH))
            raise self.fail(node, f"unknown function {name!r}; allowed: {allowed}")
        arity, build = _SMOOTH[name]
        if len(node.args) != arity:
            raise self.fail(node, f"{name}() takes {arity} argument(s), got {len(node.args)}")
        return build(*(self.visit(a) for a in node.args))


def parse_expression(
    text: str | int | float, symbols: Mapping[str, sp.Expr], where: str
) -> sp.Expr:
    """Translate one expression string into sympy, using only the given names.

    ``where`` names the key the expression came from and starts every error message.
    """
    if isinstance(text, bool):
        raise ModelError(f"{where}: expected an expression or a number, got {text!r}")
    if isinstance(text, (int, float)):
        text = repr(text)
    if not isinstance(text, str):
        raise ModelError(f"{where}: expected an expression string, got {type(text).__name__}")
    if not text.strip():
        raise ModelError(f"{where}: empty expression")
    protected = _protect_keywords(text.strip(), where, symbols)
    try:
        tree = ast.parse(protected, mode="eval")
    except SyntaxError as exc:
        col = f" at column {exc.offset}" if exc.offset else ""
        raise ModelError(f"{where}: syntax error{col} in {text!r}") from None
    return _Translator(symbols, where, text).visit(tree)


def is_valid_name(name: str) -> bool:
    """Names must look like identifiers and start with a letter (underscores are ours)."""
    return isinstance(name, str) and name.isidentifier() and name[0].isalpha() and name.isascii()
