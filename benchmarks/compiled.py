"""Measurements of a compiled lyacomp evaluator: batch rate, Python call and raw C call."""

from __future__ import annotations

from timing import per_call


def python_call(ev, kwargs: dict[str, float], calls: int, blocks: int) -> dict:
    """Median latency of the scalar call ``ev(**kwargs)``."""
    return per_call(lambda: ev(**kwargs), calls, blocks)


def prefix_of(ev) -> str:
    """The C prefix of the evaluator's entry points (``<prefix>_evaluate``)."""
    names = [n for n in dir(ev.lib) if n.endswith("_evaluate")]
    if len(names) != 1:
        raise RuntimeError(f"expected one *_evaluate entry point in ev.lib, found {names}")
    return names[0][: -len("_evaluate")]


def argument_roles(ev, function: str) -> list[str]:
    """Roles of a C entry point's arguments, read from its cffi type.

    The first ``double *`` is the parameter vector, the second the state guess; struct
    pointers are recognised by their type suffix (``_start``, ``_options``, ``_result``).
    The benchmark follows the C interface this way instead of hard-coding its signature.
    """
    roles = []
    doubles = iter(("params", "guess"))
    for arg in ev.ffi.typeof(getattr(ev.lib, function)).args:
        name = arg.cname.replace("const ", "")
        if name == "double *":
            roles.append(next(doubles))
        elif name.endswith(("_start *", "_options *", "_result *")):
            roles.append(name.rsplit("_", 1)[1].rstrip(" *"))
        else:
            raise RuntimeError(f"{function}: no rule for an argument of type {arg.cname}")
    return roles


def raw_c_args(ev, params: list[float]) -> tuple[object, list, object]:
    """``lib.<prefix>_evaluate``, its arguments and its result struct, set up through cffi
    as ``ev(**params)`` sets them up (default options, the warm start prepared at the
    nominal parameters when the interface has one)."""
    ffi, lib, prefix = ev.ffi, ev.lib, prefix_of(ev)
    nominal = [float(ev.nominal[k]) for k in ev.parameters]
    buffers = {
        "params": ffi.new("double[]", params),
        "guess": ffi.new("double[]", [float(ev.model.state_guess[s]) for s in ev.states]),
        "options": ffi.new(f"{prefix}_options *"),
        "result": ffi.new(f"{prefix}_result *"),
    }
    getattr(lib, f"{prefix}_default_options")(buffers["options"])
    roles = argument_roles(ev, f"{prefix}_evaluate")
    if "start" in roles:
        buffers["start"] = ffi.new(f"{prefix}_start *")
        prepare = f"{prefix}_prepare_start"
        setup = {**buffers, "params": ffi.new("double[]", nominal)}
        getattr(lib, prepare)(*(setup[r] for r in argument_roles(ev, prepare)))
    return getattr(lib, f"{prefix}_evaluate"), [buffers[r] for r in roles], buffers["result"]


def raw_c_call(ev, params: list[float], calls: int, blocks: int) -> dict:
    """Median latency of ``lib.<prefix>_evaluate`` called through cffi with prepared buffers
    (see ``raw_c_args``). This is the floor of any Python-side call: no argument parsing,
    no result object.
    """
    evaluate, args, result = raw_c_args(ev, params)
    evaluate(*args)
    timing = per_call(lambda: evaluate(*args), calls, blocks)
    roles = argument_roles(ev, f"{prefix_of(ev)}_evaluate")
    timing["entry_point"] = f"{prefix_of(ev)}_evaluate({', '.join(roles)})"
    timing["status"] = int(result.status)
    return timing
