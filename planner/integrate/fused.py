"""A compiled Dormand-Prince 8(5,3) attempt for large batches: one pass over the members.

The numpy stepper (:mod:`planner.integrate.solvers.dop853`) evaluates each of a step's twelve
stages as whole-array operations: every stage reads the earlier stages of every member back from
memory, about fifteen array passes per stage. Here the step is generated as straight-line code
for one member (stages, right-hand side and error estimate unrolled, the right-hand side printed
from the same specialised expressions as the numpy functions) and compiled with numba, so each
member's stages stay in registers. The arithmetic is the same method with the same coefficients
(scipy's DOP853 tables) and the same error norm; results agree with the numpy stepper to
within the tolerance (rounding differs, so step sizes can differ slightly). The stages are not
stored (storing them from the member loop stops the compiler vectorising it): the dense output
of a step recomputes them, with numpy, for the members it is asked about.

Compiled kernels are kept on disk (numba's cache beside the generated source, one file per
distinct source), so a model is compiled once per machine. Without numba, or for a model whose
expressions numba cannot compile, the numpy stepper runs instead.
"""

from __future__ import annotations

import hashlib
import importlib.util
import logging
import os
import sys
import tempfile
import threading
from pathlib import Path

import numpy as np

log = logging.getLogger(__name__)

FUSED_MIN_MEMBERS = 1024  # below this the numpy stepper is about as fast and needs no compiling
CACHE_ENV = "PLANNER_KERNEL_CACHE"  # folder for compiled kernels (default: the user's cache)
STAGES = 12
_kernels: dict[str, object] = {}
_failed: set[str] = set()
_lock = threading.Lock()


def available() -> bool:
    return importlib.util.find_spec("numba") is not None


def _cache_folder() -> Path:
    chosen = os.environ.get(CACHE_ENV)
    if chosen:
        return Path(chosen)
    base = os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache"
    return Path(base) / "regime-planner" / "kernels"


def _literal(value: float) -> str:
    return repr(float(value))


def _combination(coefficients, names: list[str]) -> str:
    terms = [f"{_literal(c)} * {name}" for c, name in zip(coefficients, names, strict=True) if c]
    return " + ".join(terms) if terms else "0.0"


def kernel_source(functions) -> str:
    """Python source of the compiled attempt for one specialised model (see module docstring)."""
    import sympy
    from scipy.integrate._ivp import dop853_coefficients as tables
    from sympy.printing.pycode import PythonCodePrinter

    n = functions.n
    arguments = functions.arguments
    states, control = arguments[:n], arguments[n]
    values = arguments[n + 1 :]
    printer = PythonCodePrinter({"fully_qualified_modules": True})
    replacements, reduced = sympy.cse(list(functions.rhs_expressions), optimizations="basic")

    def local(symbol) -> str:
        return f"_{symbol.name}"

    rename = {s: sympy.Symbol(local(s)) for s in arguments}
    rhs_lines = []
    for symbol, _ in replacements:
        rename[symbol] = sympy.Symbol(f"_c_{symbol.name}")
    for symbol, expression in replacements:
        rhs_lines.append(
            f"    {rename[symbol].name} = {printer.doprint(expression.xreplace(rename))}"
        )
    outputs = [printer.doprint(e.xreplace(rename)) for e in reduced]
    state_names = [local(s) for s in states]
    value_names = [local(s) for s in values]
    rhs_args = ", ".join([*state_names, local(control), *value_names])
    lines = [
        "import math",
        "import numpy as np",
        "from numba import njit",
        "",
        "",
        "@njit(cache=True, nogil=True, error_model='numpy', inline='always')",
        f"def rhs({rhs_args}):",
        *rhs_lines,
        f"    return ({', '.join(outputs)},)",
        "",
        "",
        "@njit(cache=True, nogil=True, error_model='numpy')",
        "def attempt(t, h, x, f0, u_a, slope, a, factor, values, rtol, atol_scale, new, f_new,",
        "            error):",
        "    m = x.shape[1]",
        f"    n = {n}",
        "    for j in range(m):",
        "        fac = factor[j]",
    ]
    for i, name in enumerate(value_names):
        lines.append(f"        {name} = values[{i}, j]")
    for v in range(n):
        lines.append(f"        x{v} = x[{v}, j]")
        lines.append(f"        k0_{v} = f0[{v}, j]")
    A, B, C = tables.A, tables.B, tables.C
    for i in range(1, STAGES + 1):
        row = B if i == STAGES else A[i, :i]
        for v in range(n):
            earlier = [f"k{p}_{v}" for p in range(i)]
            lines.append(f"        y{v} = x{v} + h * ({_combination(row, earlier)})")
        share = 1.0 if i == STAGES else C[i]
        lines.append(f"        u = (u_a + slope * (t + {_literal(share)} * h - a)) * fac")
        ys = ", ".join(f"y{v}" for v in range(n))
        lines.append(f"        r = rhs({ys}, u, {', '.join(value_names)})".replace(", )", ")"))
        for v in range(n):
            lines.append(f"        k{i}_{v} = r[{v}]")
    lines += ["        e5 = 0.0", "        e3 = 0.0"]
    for v in range(n):
        ks = [f"k{p}_{v}" for p in range(STAGES + 1)]
        lines += [
            f"        new[{v}, j] = y{v}",
            f"        f_new[{v}, j] = k{STAGES}_{v}",
            f"        w = rtol * max(abs(x{v}), abs(y{v})) + atol_scale[{v}]",
            f"        s = ({_combination(tables.E5, ks)}) / w",
            "        e5 += s * s",
            f"        s = ({_combination(tables.E3, ks)}) / w",
            "        e3 += s * s",
        ]
    lines += [
        "        if e5 > 0.0:",
        "            error[j] = abs(h) * e5 / math.sqrt((e5 + 0.01 * e3) * n)",
        "        else:",
        "            error[j] = 0.0",
        "",
    ]
    return "\n".join(lines)


def _load(source: str):
    key = hashlib.sha256(source.encode()).hexdigest()[:24]
    name = f"planner_kernel_{key}"
    if name in sys.modules:
        return sys.modules[name].attempt
    folder = _cache_folder()
    try:
        folder.mkdir(parents=True, exist_ok=True)
        path = folder / f"{name}.py"
        if not path.exists() or path.read_text(encoding="utf-8") != source:
            with tempfile.NamedTemporaryFile(
                "w", dir=folder, suffix=".tmp", delete=False, encoding="utf-8"
            ) as handle:
                handle.write(source)
            os.replace(handle.name, path)
    except OSError:
        folder = Path(tempfile.mkdtemp(prefix="planner-kernels-"))
        path = folder / f"{name}.py"
        path.write_text(source, encoding="utf-8")
    spec = importlib.util.spec_from_file_location(name, path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    sys.modules[name] = module
    return module.attempt


def kernel_for(functions):
    """The compiled attempt for these specialised functions, or None (no numba, or the model's
    expressions do not compile); compiled at the first call, then kept."""
    if not available():
        return None
    key = functions.key
    with _lock:
        if key in _kernels:
            return _kernels[key]
        if key in _failed:
            return None
        try:
            kernel = _load(kernel_source(functions))
        except Exception as failure:  # noqa: BLE001 - any failure means: use numpy instead
            log.info("compiled stepper unavailable for this model (%s); using numpy", failure)
            _failed.add(key)
            return None
        _kernels[key] = kernel
        return kernel


def member_values(values: tuple, m: int) -> np.ndarray:
    """The free and hoisted parameter values as one (k, m) array (scalars repeated)."""
    out = np.empty((max(len(values), 1), m))
    for i, value in enumerate(values):
        out[i] = value
    return out
