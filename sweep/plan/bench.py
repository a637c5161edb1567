"""Kernel speed benchmark: reaction events per CPU-second on built-in networks.

The networks are our own choice of textbook models, each small and with a known answer:

- ``isomerization``: A <-> B, the textbook first-order reversible reaction; binomial at steady
  state (common practice: independent molecules, each in B with probability k_f / (k_f + k_b));
- ``gene_expression``: the two-stage model of transcription and translation, protein Fano factor
  1 + k_p / (g_m + g_p) (Thattai & van Oudenaarden 2001, PNAS 98:8614);
- ``dimerization``: 2 A <-> B, the simplest second-order reaction, with the pair-counting
  propensity c A (A - 1) / 2 (Gillespie 1977);
- ``chain50``: a linear chain S0 <-> S1 <-> ... <-> S49 of first-order steps, a linear network
  with exact moment equations (common practice); it stresses the search over many reactions.

Two more are there for the other methods: a 100-reaction chain (many reactions, few touched per
event: the next reaction method's case, Gibson & Bruck 2000) and gene expression at ~10^4
proteins (high copy numbers: tau-leaping's case, Cao, Gillespie & Petzold 2006).

Three measure custom rate laws against the same networks in mass action: ``gene_expression_law``
(``gene_expression`` with every propensity written as an expression, ``"kp * M"``, the same process
bit for bit), ``self_repressor`` (a gene repressing itself through ``hill_down(P, vmax, K, n)`` with
n = 2, the textbook negative autoregulation; Hill 1910 for the law) and ``self_repressor_constant``
(the same network with the Hill law replaced by the constant vmax / 2, its value at P = K).

Six are large, for the exact methods' scaling with the number of reactions R (``LARGE``, measured
with ``sweep bench --large``): ``ring100``, ``ring1000``, ``ring10000``, a ring of R/2 sites with a
reversible hop between neighbours (uniform stationary occupation, common practice: detailed
balance), and ``random100`` .. ``random10000``, an invented closed network of first- and
second-order conversions with a stationary state. The direct method's search grows with R; the
next reaction method's queue with log R; composition-rejection's cost per event stays nearly flat
(Slepoy, Thompson & Plimpton 2008).

Any registered method can be measured. For a method whose ``events`` are not reaction
events (tau-leaping counts steps; its registry record says so in ``events``), the
figures are per step, so compare methods by ``replicates_per_cpu_second``; the
time-averaged ``mean_counts`` of the same replicates show what an approximate method
gives for that speed.
"""

from __future__ import annotations

import time
from pathlib import Path
from dataclasses import dataclass
from typing import Callable, Iterable

import numpy as np

from sweep.errors import SpecError
from sweep.model import Model, compile_network, initial_counts, parse_model, rate_constants


def _chain(n: int, spread: bool = False) -> dict:
    species = {f"S{i}": (20 if spread else 1000 if i == 0 else 0) for i in range(n)}
    reactions = {}
    for i in range(n - 1):
        reactions[f"f{i}"] = {"reaction": f"S{i} -> S{i + 1}", "rate": 1.0}
        reactions[f"b{i}"] = {"reaction": f"S{i + 1} -> S{i}", "rate": 1.0}
    return {"species": species, "reactions": reactions}


def _ring(n_reactions: int) -> tuple[dict, float]:
    """A ring of n/2 sites with a reversible hop between neighbours (rate 1 each way), 20 molecules
    per site: a closed first-order network, multinomial at steady state with equal site
    probabilities (Jahnke & Huisinga 2007). Every reaction stays active, as in a large network at
    steady state. The time span gives about 5e5 events per replicate at every size."""
    sites = n_reactions // 2
    reactions = {}
    for i in range(sites):
        reactions[f"f{i}"] = {"reaction": f"S{i} -> S{(i + 1) % sites}", "rate": 1.0}
        reactions[f"b{i}"] = {"reaction": f"S{(i + 1) % sites} -> S{i}", "rate": 1.0}
    return {"species": {f"S{i}": 20 for i in range(sites)}, "reactions": reactions}, 5e5 / (20.0 * n_reactions)


def _random_network(n_reactions: int, seed: int = 20261213) -> tuple[dict, float]:
    """An invented closed network on n/4 species with 50 molecules each: a first-order ring
    S0 -> S1 -> ... -> S0 through a random permutation (so every species is consumed and the state
    space is irreducible), then random first-order conversions X -> Y and second-order exchanges
    X + Y -> Z + W, half each. Every reaction conserves the number of molecules, so the state space
    is finite and a stationary distribution exists. Rates are uniform on [0.1, 1], divided by 50 for
    the second-order ones so that both kinds have comparable propensities."""
    rng = np.random.default_rng(seed)
    n_s = n_reactions // 4
    perm = rng.permutation(n_s)
    reactions = {}
    for i in range(n_s):
        reactions[f"ring{i}"] = {"reaction": f"S{perm[i]} -> S{perm[(i + 1) % n_s]}",
                                 "rate": float(rng.uniform(0.1, 1.0))}
    for i in range(n_reactions - n_s):
        if i % 2 == 0:
            x, y = rng.choice(n_s, 2, replace=False)
            reactions[f"uni{i}"] = {"reaction": f"S{x} -> S{y}", "rate": float(rng.uniform(0.1, 1.0))}
        else:
            x, y, z, w = rng.choice(n_s, 4, replace=False)
            reactions[f"bi{i}"] = {"reaction": f"S{x} + S{y} -> S{z} + S{w}",
                                   "rate": float(rng.uniform(0.1, 1.0)) / 50.0}
    return {"species": {f"S{i}": 50 for i in range(n_s)}, "reactions": reactions}, 5e5 / (30.0 * n_reactions)


def _gene_expression_law() -> dict:
    rates = {"km": 10.0, "gm": 1.0, "kp": 10.0, "gp": 0.1}
    laws = {"tx": ("0 -> M", "km"), "dm": ("M -> 0", "gm * M"), "tl": ("M -> M + P", "kp * M"),
            "dp": ("P -> 0", "gp * P")}
    return {"species": {"M": 0, "P": 0}, "parameters": rates,
            "reactions": {name: {"reaction": eq, "propensity": law} for name, (eq, law) in laws.items()}}


def _self_repressor(constant: bool) -> dict:
    make = ({"reaction": "0 -> P", "rate": "half"} if constant
            else {"reaction": "0 -> P", "propensity": "hill_down(P, vmax, K, n)"})
    return {"species": {"P": 0}, "parameters": {"vmax": 30.0, "K": 10.0, "n": 2.0, "g": 1.0, "half": 15.0},
            "reactions": {"make": make, "decay": {"reaction": "P -> 0", "rate": "g"}}}


LARGE_SIZES = (100, 1000, 10_000)
# measured only when asked for (``sweep bench --large``): the direct method takes seconds per
# replicate on the 10,000-reaction ones
LARGE = tuple(f"{family}{n}" for family in ("ring", "random") for n in LARGE_SIZES)
LARGE_METHODS = ("direct", "nrm", "cr")

NETWORKS: dict[str, tuple[dict, float]] = {
    "isomerization": ({"species": {"A": 1000, "B": 0},
                       "reactions": {"f": {"reaction": "A -> B", "rate": 1.0},
                                     "b": {"reaction": "B -> A", "rate": 1.0}}}, 100.0),
    "gene_expression": ({"species": {"M": 0, "P": 0},
                         "reactions": {"tx": {"reaction": "0 -> M", "rate": 10.0},
                                       "dm": {"reaction": "M -> 0", "rate": 1.0},
                                       "tl": {"reaction": "M -> M + P", "rate": 10.0},
                                       "dp": {"reaction": "P -> 0", "rate": 0.1}}}, 1000.0),
    "dimerization": ({"species": {"A": 1000, "B": 0},
                      "reactions": {"f": {"reaction": "2 A -> B", "rate": 0.001},
                                    "b": {"reaction": "B -> 2 A", "rate": 0.5}}}, 400.0),
    "chain50": (_chain(50), 100.0),
    # S0 <-> S1 <-> ... <-> S50: 51 species, 50 forward + 50 backward reactions (one more link than
    # chain50, whose 49 links make 98 reactions). Many reactions, few touched per
    # event: where the next reaction method's heap beats the direct method's linear search.
    "chain100": (_chain(51), 100.0),
    # the same chain with 20 molecules on every site: every reaction is active from the start, so the
    # direct method's search runs over half the list per event on average, as in a large network at
    # steady state (on chain100 the mass stays near the front, which keeps that search short)
    "chain100_spread": (_chain(51, spread=True), 100.0),
    # gene_expression with 10x the transcription: mRNA ~ 100, protein ~ 10^4 (Fano factor 10.1),
    # ~2200 events per time unit; stationary after ~10 protein lifetimes (the grid's second half)
    "gene_expression_1e4": ({"species": {"M": 0, "P": 0},
                             "reactions": {"tx": {"reaction": "0 -> M", "rate": 100.0},
                                           "dm": {"reaction": "M -> 0", "rate": 1.0},
                                           "tl": {"reaction": "M -> M + P", "rate": 10.0},
                                           "dp": {"reaction": "P -> 0", "rate": 0.1}}}, 200.0),
    "gene_expression_law": (_gene_expression_law(), 1000.0),
    "self_repressor": (_self_repressor(False), 1000.0),
    "self_repressor_constant": (_self_repressor(True), 1000.0),
    # large networks: where the direct method's search grows with R and composition-rejection's cost
    # does not (Slepoy, Thompson & Plimpton 2008)
    **{f"ring{n}": _ring(n) for n in LARGE_SIZES},
    **{f"random{n}": _random_network(n) for n in LARGE_SIZES},
}


@dataclass(frozen=True)
class BenchResult:
    """Speed of one method on one network.

    ``events_*`` count what the kernel's ``events`` count: reaction events for exact methods,
    steps (leaps plus exact steps) when ``unit`` is ``"steps"``. ``replicates_per_cpu_second`` is
    comparable across methods. ``mean_counts`` is the mean count of each species (in model order)
    over the second half of the time grid and every timed replicate.
    """

    network: str
    method: str
    events_per_cpu_second: float
    events_per_replicate: float
    unit: str = "events"
    replicates_per_cpu_second: float = 0.0
    mean_counts: tuple[float, ...] = ()


def measure(method: str = "direct", networks: Iterable[str] | None = None, repeats: int = 5,
            min_seconds: float = 0.5, samples: int = 101) -> list[BenchResult]:
    """Median events per CPU-second of ``method`` over ``repeats`` timed batches.

    Each batch runs whole replicates until at least ``min_seconds`` of CPU time passed,
    after one warm-up call (which also compiles the kernel). ``networks`` defaults to every
    built-in network but the ``LARGE`` ones.

    Raises
    ------
    SpecError
        If ``method`` is not a registered kernel or a network is unknown.
    """
    kernel = _kernel(method)
    unit = _unit(method)
    out = []
    for name in networks or [n for n in NETWORKS if n not in LARGE]:
        if name not in NETWORKS:
            raise SpecError("sweep bench", "--network", "unknown network", name, f"one of: {', '.join(NETWORKS)}")
        table, t_end = NETWORKS[name]
        model = parse_model(table, f"<bench {name}>")
        out.append(_measure_one(kernel.simulate, name, method, model, t_end, repeats, min_seconds, samples,
                                unit=unit))
    return out


def _kernel(method: str):
    import kernels

    if method not in kernels.METHODS:
        raise SpecError("sweep bench", "--method", "unknown method", method,
                        f"one of: {', '.join(kernels.METHODS)}")
    return kernels.get(method)


def _unit(method: str) -> str:
    import kernels

    return kernels.record(method).events


def measure_spec(path, repeats: int = 5, min_seconds: float = 0.5) -> BenchResult:
    """Kernel speed on the first point of a spec (its model, rates and time grid)."""
    import kernels
    from sweep.spec import load

    spec = load(path)
    values = spec.values_at(spec.points()[0])
    table = None
    kernel = kernels.get(spec.method)
    return _measure_one(kernel.simulate, f"{Path(path).name} (point 0)", spec.method,
                        spec.model, spec.times[-1], repeats, min_seconds, len(spec.times), values, table,
                        unit=_unit(spec.method))


def _measure_one(simulate: Callable, name: str, method: str, model: Model, t_end: float,
                 repeats: int, min_seconds: float, samples: int, values=None, _=None,
                 unit: str = "events") -> BenchResult:
    net = compile_network(model)
    values = values if values is not None else model.parameter_values
    args = (net, rate_constants(model, values), initial_counts(model, values), np.linspace(0.0, t_end, samples))
    seed = 0
    simulate(*args, [np.random.SeedSequence(12345, spawn_key=(0, 0))], 10**12)
    rates, per_rep, reps_per_s = [], [], []
    half = samples // 2
    count_sum, n_rows = np.zeros(len(args[2])), 0
    for _ in range(repeats):
        events, start, n = 0, time.process_time(), 0
        while True:
            seed += 1
            res = simulate(*args, [np.random.SeedSequence(12345, spawn_key=(1, seed))], 10**12)
            events += int(res.events.sum())
            n += 1
            if (res.status == 0).all():
                count_sum += res.counts[:, half:, :].sum(axis=(0, 1))
                n_rows += res.counts.shape[0] * (samples - half)
            elapsed = time.process_time() - start
            if elapsed >= min_seconds:
                break
        rates.append(events / elapsed)
        per_rep.append(events / n)
        reps_per_s.append(n / elapsed)
    means = tuple(float(v) for v in count_sum / max(n_rows, 1))
    return BenchResult(name, method, float(np.median(rates)), float(np.mean(per_rep)), unit,
                       float(np.median(reps_per_s)), means)
