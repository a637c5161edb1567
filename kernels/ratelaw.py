"""Custom rate laws compiled into the kernels: named laws and the loader of generated code.

A model's non-mass-action propensities become one generated Python module (``sweep.ratelaw``
writes its source from whitelisted expressions) holding two numba C callbacks::

    law_int(j, x, p)    x: int64*   (the exact and leaping kernels' integer state)
    law_float(j, x, p)  x: float64* (the Langevin and ODE kernels' real state)

``j`` is the reaction index, ``p`` the kernel's ``rates`` array, which for such a model holds
the R mass-action constants followed by the model's parameter values. Kernels receive the
callbacks' machine addresses as plain integers (0 without laws) and call through them with
``call_law``, so each kernel is compiled and cached once for every model; only the small
callback module is compiled per model, and numba caches it next to its source file, keyed by
the source's SHA-256.

Writing that source file into a cache folder is the one file access under ``kernels/``: numba
can only cache code that lives in a file.
"""

from __future__ import annotations

import hashlib
import importlib.util
import os
import sys
import tempfile
from pathlib import Path

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


class RateLaw:
    """Generated source of a model's custom propensities; compiled lazily, once per process.

    Pickles as its source text only, so a Dask worker or a shard on another node compiles (or
    loads from numba's cache) its own copy.
    """

    def __init__(self, source: str) -> None:
        self.source = source
        self.sha256 = hashlib.sha256(source.encode()).hexdigest()

    def __reduce__(self):
        return RateLaw, (self.source,)

    def __eq__(self, other) -> bool:
        return isinstance(other, RateLaw) and other.source == self.source

    def __hash__(self) -> int:
        return hash(self.source)

    def callbacks(self):
        """(law_int, law_float) numba C callbacks of this law."""
        module = _LOADED.get(self.sha256)
        if module is None:
            module = _LOADED[self.sha256] = _import(self.source, self.sha256)
        return module.law_int, module.law_float


_LOADED: dict = {}  # sha256 -> imported module: a per-process cache, like numba's own


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


def _import(source: str, sha256: str):
    name = f"stochsweep_law_{sha256[:24]}"
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
