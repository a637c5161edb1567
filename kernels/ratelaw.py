"""Custom rate laws compiled into the kernels: named laws and the loaders of generated code.

A model's non-mass-action propensities come as generated Python source (``sweep.model.ratelaws``
writes it from whitelisted expressions), in two forms carried by one ``RateLaw``:

- ``inline``: the laws as numba functions meant to be compiled *into* an event loop::

      law_constants(p) -> q           the laws' parameter-only subexpressions, once per block
      law_value_int(q, j, x, p)       x: int64 state (direct, nrm, tau_leap, cr)
      law_value_float(q, j, x, p)     x: float64 state (cle)

  ``specialised(module, law)`` writes a module holding those functions followed by the source of
  the kernel's functions on the path from its event loop to ``law_value`` (the kernel lists them in
  ``LAW_PATH``), so the laws are inlined into the loop and LLVM keeps it in registers. One such
  module per (method, laws) is compiled once per machine and cached by numba next to its file.
- ``source``: two numba C callbacks, ``law_int(j, x, p)`` and ``law_float(j, x, p)``, called through
  their machine addresses with ``call_law``; the ODE kernel (whose cost is the solver's, not the law's)
  and a ``RateLaw`` without an inline form use them.

``j`` is the reaction index, ``p`` the kernel's ``rates`` array, which for such a model holds
the R mass-action constants followed by the model's parameter values.

Writing generated source files into a cache folder (and reading this package's own source to
copy the event loops and to key those files) is the one file access under ``kernels/``: numba
can only cache code that lives in a file.
"""

from __future__ import annotations

import functools
import hashlib
import importlib.util
import inspect
import os
import sys
import tempfile
from pathlib import Path
from types import ModuleType

import numba
from llvmlite import ir
from numba import types
from numba.extending import intrinsic

LAW_INT = types.float64(types.int64, types.CPointer(types.int64), types.CPointer(types.float64))
LAW_FLOAT = types.float64(types.int64, types.CPointer(types.float64), types.CPointer(types.float64))

# The named laws. Each is written exactly as the custom expression a user would type for it, in
# the same operation order, so the named and the spelled-out forms give the same bits.


@numba.njit(inline="always", cache=True, error_model="numpy")
def hill_up(x, vmax, k, n):
    """Hill activation vmax x^n / (K^n + x^n) (Hill 1910; common practice in gene circuits)."""
    return vmax * x ** n / (k ** n + x ** n)


@numba.njit(inline="always", cache=True, error_model="numpy")
def hill_down(x, vmax, k, n):
    """Hill repression vmax K^n / (K^n + x^n)."""
    return vmax * k ** n / (k ** n + x ** n)


@numba.njit(inline="always", cache=True, error_model="numpy")
def michaelis(s, vmax, km):
    """Michaelis–Menten vmax S / (Km + S) (Michaelis & Menten 1913)."""
    return vmax * s / (km + s)


@numba.njit(inline="always", cache=True, error_model="numpy")
def clamp(v):
    """A propensity that evaluates negative or NaN counts as 0: the reaction cannot fire."""
    return v if v > 0.0 else 0.0


_EXACT = 9007199254740992.0  # 2**53: every whole number of smaller magnitude is a double


@numba.njit(inline="always", cache=True, error_model="numpy")
def ipow(b, e):
    """``b ** e`` for a whole number ``b`` (a molecule count), by multiplication when ``e`` is 1, 2, 3
    or 4 and the result is below 2**53 in magnitude, else by ``pow``.

    Both give the same bits: every partial product is then a whole number below 2**53, so exact,
    and ``pow`` returns the exact result whenever it is a double (glibc's pow is accurate to well
    under one unit in the last place; checked on every b < 2**22 and 10^7 random b up to the 2**53
    bound for each e, and on the powers of two, in tests/kernels/test_ratelaws.py). ``e`` is a
    parameter, fixed for a run, so its branch is always predicted; a Hill coefficient n = 2 costs a
    multiplication instead of a call to pow.
    """
    if e == 2.0:
        r = b * b
    elif e == 1.0:
        return b
    elif e == 3.0:
        r = b * b * b
    elif e == 4.0:
        s = b * b
        r = s * s
    else:
        return b ** e
    if -_EXACT < r < _EXACT:
        return r
    return b ** e


class RateLaw:
    """Generated source of a model's custom propensities; compiled lazily, once per process.

    ``source`` holds the C callbacks, ``inline`` (optional) the functions compiled into a kernel's
    event loop (module docstring). Pickles as its two texts only, so a Dask worker or a shard on
    another node writes and compiles (or loads from numba's cache) its own copy.
    """

    def __init__(self, source: str, inline: str | None = None) -> None:
        self.source = source
        self.inline = inline
        self.sha256 = hashlib.sha256((source + "\0" + (inline or "")).encode()).hexdigest()

    def __reduce__(self):
        return RateLaw, (self.source, self.inline)

    def __eq__(self, other) -> bool:
        return isinstance(other, RateLaw) and (other.source, other.inline) == (self.source, self.inline)

    def __hash__(self) -> int:
        return hash((self.source, self.inline))

    def callbacks(self):
        """(law_int, law_float) numba C callbacks of this law."""
        key = hashlib.sha256(self.source.encode()).hexdigest()
        module = _LOADED.get(key)
        if module is None:
            module = _LOADED[key] = _import(self.source, f"stochsweep_law_{key[:24]}")
        return module.law_int, module.law_float


_LOADED: dict = {}  # what a generated module is keyed by -> the module: a per-process cache, like numba's own


def cache_folder() -> Path:
    """Where generated rate-law modules and their numba caches live.

    ``SWEEP_CACHE_DIR`` if set, else ``~/.cache/stochsweep/ratelaws``; a temporary folder when
    neither can be written (the laws still work, they are just compiled again next time).
    """
    base = os.environ.get("SWEEP_CACHE_DIR")
    folder = Path(base) if base else Path.home() / ".cache" / "stochsweep" / "ratelaws"
    try:
        folder.mkdir(parents=True, exist_ok=True)
        return folder
    except OSError:
        return Path(tempfile.mkdtemp(prefix="stochsweep-ratelaws-"))


def _import(source: str, name: str) -> ModuleType:
    path = cache_folder() / f"{name}.py"
    if not path.exists() or path.read_text(encoding="utf-8") != source:
        # several worker processes may write at once: each writes its own file, then renames
        tmp = path.with_suffix(f".{os.getpid()}.tmp")
        tmp.write_text(source, encoding="utf-8")
        os.replace(tmp, path)
    spec = importlib.util.spec_from_file_location(name, path)
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module
    spec.loader.exec_module(module)
    return module


def addresses(network) -> tuple[int | None, int | None]:
    """Machine addresses of ``network``'s (law_int, law_float) callbacks; (None, None) without laws.

    Kernels take the address as a plain int64 and call through it with ``call_law``; a jitted
    function as an argument would defeat numba's on-disk cache. A mass-action network passes
    None: numba then prunes the ``law is not None`` branch and compiles a second, law-free
    variant of the kernel. That matters: an opaque call that receives the state's pointer,
    even one never taken, stops LLVM from keeping the event loop in registers (measured 4x
    slower per event in the direct method, 14 vs 58 M events/s).
    """
    if network.law is None:
        return None, None
    law_int, law_float = network.law.callbacks()
    return law_int.address, law_float.address


@intrinsic
def call_law(typingctx, address, j, x, p):
    """Call the rate-law callback at ``address`` for reaction ``j`` on state ``x``, parameters ``p``.

    ``x`` is an int64 or float64 array (picking ``law_int`` or ``law_float``'s C signature),
    ``p`` the kernel's float64 ``rates`` array; the callback gets their data pointers.
    """
    def codegen(context, builder, signature, args):
        addr, jj, xa, pa = args
        x_data = context.make_array(signature.args[2])(context, builder, xa).data
        p_data = context.make_array(signature.args[3])(context, builder, pa).data
        fnty = ir.FunctionType(ir.DoubleType(), [ir.IntType(64), x_data.type, p_data.type])
        fn = builder.inttoptr(addr, fnty.as_pointer())
        return builder.call(fn, [context.cast(builder, jj, signature.args[1], types.int64), x_data, p_data])
    return types.float64(types.int64, j, x, p), codegen


# --- kernels specialised for a model's laws --------------------------------------------------------

_HEADER = '''"""Generated by stochsweep: {module}'s event loop with one model's rate laws inline. Do not edit;
the file name is the SHA-256 of this text, which includes the digest of the kernels' sources."""
# kernels sources: {digest}
{imports}
{updates}

# --- the model's laws (sweep.model.ratelaws.inline_source) ---
{laws}
law_value = {law_value}

# --- copied from the kernels, in LAW_PATH order ---
'''


def specialised(module: ModuleType, law: RateLaw, real: bool) -> ModuleType:
    """The kernel ``module`` compiled with ``law``'s laws inline: a module with the same ``run``.

    The generated module starts from the namespaces of the modules defining ``module.LAW_PATH``
    (so every helper and constant keeps its meaning), defines the model's ``law_constants`` and its
    ``law_value`` (the float form if ``real``, the state being float64), then re-defines the
    functions of ``LAW_PATH`` from their source, so that each of them resolves ``law_value`` and the
    others to the new definitions. It computes the same operations in the same order as the
    callback path, so it gives the same bits (tests/kernels/test_recorded_outputs.py).

    Parameters
    ----------
    module : module
        A kernel module with ``LAW_PATH`` (a tuple of its numba functions, callees first, ending
        with its ``run``).
    law : RateLaw
        With an ``inline`` form.
    real : bool
        Whether the kernel's state is float64.

    Returns
    -------
    module
        Imported once per process; its file lives in ``cache_folder()``.
    """
    memo = (module.__name__, law.sha256, real)
    loaded = _LOADED.get(memo)
    if loaded is None:
        text = specialised_source(module, law, real)
        key = hashlib.sha256(text.encode()).hexdigest()
        short = module.__name__.rsplit(".", 1)[-1]
        loaded = _LOADED[memo] = _import(text, f"stochsweep_{short}_{key[:24]}")
    return loaded


def specialised_source(module: ModuleType, law: RateLaw, real: bool) -> str:
    """The text of ``specialised``'s module (pure; for tests and for ``is_cached``)."""
    functions = [f.py_func for f in module.LAW_PATH]
    homes = list(dict.fromkeys(f.__module__ for f in functions))
    imports = "\n".join(f"import {name} as _home{i}" for i, name in enumerate(homes))
    updates = "\n".join(f"globals().update({{k: v for k, v in vars(_home{i}).items() if not k.startswith('__')}})"
                        for i in range(len(homes)))
    value = "law_value_float" if real else "law_value_int"
    body = "\n\n".join(_splice(inspect.getsource(f).rstrip(), law.inline, value) for f in functions)
    return _HEADER.format(module=module.__name__, digest=_kernel_digest(), imports=imports, updates=updates,
                          laws=law.inline.strip(), law_value=value) \
        + "\n\n" + body + "\n"


def is_cached(module: ModuleType, law: RateLaw, real: bool) -> bool:
    """Whether ``specialised(module, law, real)`` would load compiled code from numba's disk cache.

    True when the generated file exists and numba holds an index for its ``run``; a new model (or
    new kernel sources) gives False, and the first call then compiles (see docs/notes/kernels.md for the
    cost). Imports nothing that compiles.
    """
    text = specialised_source(module, law, real)
    key = hashlib.sha256(text.encode()).hexdigest()
    short = module.__name__.rsplit(".", 1)[-1]
    name = f"stochsweep_{short}_{key[:24]}"
    folder = cache_folder()
    if not (folder / f"{name}.py").exists():
        return False
    base = os.environ.get("NUMBA_CACHE_DIR")
    where = [folder / "__pycache__"] + ([Path(base)] if base else [])
    return any(any(p.glob(f"{name}.run-*.nbi")) for p in where if p.exists()) or \
        (bool(base) and any(Path(base).rglob(f"{name}.run-*.nbi")))


_CALL = "return law_value(law, p1, x, rates)"


def _splice(source: str, inline: str, name: str) -> str:
    """``source`` with the statement ``return law_value(law, p1, x, rates)`` replaced by the body of
    the inline law ``name`` (whose parameters have those names), re-indented.

    Numba's refcount pruning keeps the array references of an inlined call nested in another
    inlined function (``propensity`` in the event loop): an incref and a decref call per array and
    per propensity, which cost more than the law. Spliced in, the law is plain code of
    ``propensity`` and the references go as in a mass-action model. Other call sites keep the call.
    """
    lines = source.splitlines()
    at = [i for i, line in enumerate(lines) if line.strip() == _CALL]
    if not at:
        return source
    law_lines = inline.splitlines()
    start = law_lines.index(next(l for l in law_lines if l.startswith(f"def {name}(")))
    body = []
    for line in law_lines[start + 1:]:
        if line and not line.startswith("    "):
            break
        body.append(line[4:])
    while body and not body[-1].strip():
        body.pop()
    for i in reversed(at):
        indent = lines[i][: len(lines[i]) - len(lines[i].lstrip())]
        lines[i:i + 1] = [indent + b if b else b for b in body]
    return "\n".join(lines)


@functools.lru_cache(maxsize=1)
def _kernel_digest() -> str:
    """SHA-256 of every source file of this package: numba keys its cache on the stamp of the
    generated file only, so a change to any kernel source must give a new file."""
    h = hashlib.sha256()
    for path in sorted(Path(__file__).parent.glob("*.py")):
        h.update(path.name.encode() + b"\0" + path.read_bytes() + b"\0")
    return h.hexdigest()
