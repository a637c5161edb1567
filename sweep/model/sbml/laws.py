"""Kinetic laws to propensities: mass-action recognition, named laws, unit conversion.

A kinetic law ``f`` gives the reaction rate in extent units per time, with each species symbol
read as its amount (``hasOnlySubstanceUnits``) or its concentration. With ``alpha_e`` molecules
per extent unit and ``beta_s`` molecules per unit of species ``s``'s symbol (``alpha_s`` for an
amount, ``alpha_s * V`` for a concentration in a compartment of size V), the propensity in
molecules per time is ``a = alpha_e * f(n_s / beta_s)`` for counts ``n_s``.

Mass-action laws ``K * prod_s X_s**m_s`` (K free of species) become the stochastic constant of
Gillespie (1977), which replaces ``n**m`` by the number of distinct combinations
``n (n-1) ... (n-m+1) / m!``::

    c = alpha_e * K * prod_s (m_s! / beta_s**m_s)

so c = k/(N_A V) for A + B and 2k/(N_A V) for 2A with molar k and a law V*k*[A][B]. A law
already written with falling factorials on item amounts (``c * A * (A - 1) / 2``, as our own
export writes them) is recognised too, with c = alpha_e * K * prod m_s!.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping

# ---- products of factors --------------------------------------------------------------------


@dataclass(frozen=True)
class Product:
    """``coef * prod(atom ** exponent)``: a law's multiplicative structure.

    ``atoms`` maps a tree that is not itself a product or quotient (a name, a sum, a call, a
    power with a symbolic exponent) to its integer exponent.
    """

    coef: float
    atoms: tuple[tuple[tuple, int], ...]

    def exponents(self) -> dict[tuple, int]:
        return dict(self.atoms)


def product(tree: tuple) -> Product:
    """Split a tree into a number times whole-number powers of atoms.

    Example
    -------
    >>> product(("/", ("*", ("name", "k"), ("name", "A")), ("num", 2.0)))
    Product(coef=0.5, atoms=((('name', 'k'), 1), (('name', 'A'), 1)))
    """
    coef, atoms = _split(tree)
    return Product(coef, tuple((a, e) for a, e in atoms.items() if e != 0))


def _split(tree: tuple) -> tuple[float, dict[tuple, int]]:
    kind = tree[0]
    if kind == "num":
        return tree[1], {}
    if kind == "neg":
        coef, atoms = _split(tree[1])
        return -coef, atoms
    if kind in ("*", "/"):
        c1, a1 = _split(tree[1])
        c2, a2 = _split(tree[2])
        sign = 1 if kind == "*" else -1
        merged = dict(a1)
        for atom, e in a2.items():
            merged[atom] = merged.get(atom, 0) + sign * e
        if kind == "/" and c2 == 0:
            return math.nan, merged
        return (c1 * c2 if kind == "*" else c1 / c2), merged
    if kind == "**" and tree[2][0] == "num" and float(tree[2][1]).is_integer() and abs(tree[2][1]) <= 64:
        n = int(tree[2][1])
        coef, atoms = _split(tree[1])
        return coef ** n, {a: e * n for a, e in atoms.items()}
    return 1.0, {tree: 1}


def build(coef: float, atoms: Mapping[tuple, int] | tuple) -> tuple:
    """The tree of ``coef * prod(atom ** e)``: numerator first, one division by the rest."""
    items = list(atoms.items()) if isinstance(atoms, Mapping) else list(atoms)
    top = [_power(a, e) for a, e in items if e > 0]
    bottom = [_power(a, -e) for a, e in items if e < 0]
    if coef != 1.0 or not top:
        top.insert(0, ("num", float(coef)))
    tree = top[0]
    for t in top[1:]:
        tree = ("*", tree, t)
    if bottom:
        den = bottom[0]
        for t in bottom[1:]:
            den = ("*", den, t)
        tree = ("/", tree, den)
    return tree


def _power(atom: tuple, e: int) -> tuple:
    return atom if e == 1 else ("**", atom, ("num", float(e)))


def names(tree: tuple) -> set[str]:
    """Every name a tree reads."""
    if tree[0] == "name":
        return {tree[1]}
    if tree[0] == "num":
        return set()
    if tree[0] == "call":
        return set().union(*(names(a) for a in tree[2]))
    return set().union(*(names(t) for t in tree[1:]))


# ---- mass action ----------------------------------------------------------------------------


@dataclass(frozen=True)
class MassAction:
    """A law recognised as mass action: ``c = factor * constant`` over ``reactants``.

    ``constant`` is the species-free part of the law as a tree (parameters and numbers, with the
    numeric coefficient folded into ``factor``); ``catalysts`` are species that multiply the law
    once without being reactants (they go on both sides of the reaction).
    """

    factor: float
    constant: tuple | None
    catalysts: tuple[str, ...]
    falling: bool


def mass_action(tree: tuple, reactants: Mapping[str, int], species: set[str], beta: Mapping[str, float],
                alpha_e: float) -> MassAction | None:
    """Recognise ``K * prod X_s**m_s`` (or falling factorials of item amounts); else None.

    Parameters
    ----------
    tree : tuple
        The law, compartments already replaced by their sizes.
    reactants : mapping
        Species to stoichiometry (the law's species must match these exactly, apart from
        catalysts that appear once).
    species : set of str
        Every species id (to tell species from parameters).
    beta : mapping
        Molecules per unit of each species symbol in the law.
    alpha_e : float
        Molecules per extent unit.

    Example
    -------
    >>> mass_action(("*", ("name", "k"), ("name", "A")), {"A": 1}, {"A"}, {"A": 1.0}, 1.0)
    MassAction(factor=1.0, constant=('name', 'k'), catalysts=(), falling=False)
    """
    prod = product(tree)
    if not math.isfinite(prod.coef) or prod.coef == 0:
        return None
    exps = prod.exponents()
    powers: dict[str, int] = {}
    falling: dict[str, list[float]] = {}
    constant: dict[tuple, int] = {}
    for atom, e in exps.items():
        if atom[0] == "name" and atom[1] in species:
            powers[atom[1]] = e
        elif _falling_term(atom, species) and e == 1:
            falling.setdefault(atom[1][1], []).append(atom[2][1])
        elif names(atom) & species:
            return None
        else:
            constant[atom] = e
    factor = alpha_e * prod.coef
    used_falling = False
    catalysts = []
    for s in set(powers) | set(falling) | set(reactants):
        m = reactants.get(s, 0)
        if s in falling:
            # X (X - 1) ... (X - m + 1): only counts of items, where it is the exact combination count
            if beta.get(s) != 1.0 or powers.get(s) != 1 or sorted(falling[s]) != [float(i) for i in range(1, m)]:
                return None
            factor *= math.factorial(m)
            used_falling = True
        elif m > 0:
            if powers.get(s) != m:
                return None
            factor *= math.factorial(m) / beta[s] ** m
        elif powers.get(s) == 1:
            catalysts.append(s)
            factor /= beta[s]
        else:
            return None
    const_tree = build(1.0, constant) if constant else None
    if abs(factor - 1.0) <= 4e-16 * 4:
        # the molecules-per-unit factors cancelled but for rounding (N_A V / (N_A V) can be
        # 0.9999999999999999): a factor this close to 1 is 1, so the law keeps the model's parameter
        factor = 1.0
    return MassAction(factor, const_tree, tuple(sorted(catalysts)), used_falling)


def _falling_term(atom: tuple, species: set[str]) -> bool:
    return (atom[0] == "-" and atom[1][0] == "name" and atom[1][1] in species and atom[2][0] == "num"
            and float(atom[2][1]).is_integer() and atom[2][1] >= 1)


def difference(tree: tuple) -> tuple[tuple, tuple] | None:
    """``(forward, backward)`` when the law is ``forward - backward`` at the top, else None."""
    if tree[0] == "-":
        return tree[1], tree[2]
    if tree[0] == "+" and tree[2][0] == "neg":
        return tree[1], tree[2][1]
    if tree[0] == "+" and tree[1][0] == "neg":
        return tree[2], tree[1][1]  # -backward + forward
    return None


def factored_difference(tree: tuple) -> tuple[tuple, tuple, tuple] | None:
    """``(F, forward, backward)`` when the law is ``F * (forward - backward)`` in any arrangement of
    factors and divisors (``comp * (kf * A - kr * B)``, ``(Vf*a - Vr*b) / (1 + a + b)``), else None.

    ``F`` is the product of the other factors (a tree, ``("num", 1.0)`` when there are none); the
    difference must be the only factor that subtracts in the numerator.

    Example
    -------
    >>> law = ("*", ("name", "c"), ("-", ("name", "A"), ("name", "B")))
    >>> factored_difference(law)
    (('name', 'c'), ('name', 'A'), ('name', 'B'))
    """
    prod = product(tree)
    found = [(a, difference(a)) for a, e in prod.atoms if e == 1 and difference(a) is not None]
    if len(found) != 1 or not math.isfinite(prod.coef):
        return None
    atom, (forward, backward) = found[0]
    rest = {a: e for a, e in prod.atoms if a != atom}
    return build(prod.coef, rest), forward, backward


# ---- named laws -----------------------------------------------------------------------------


def named_law(tree: tuple, species: set[str], beta: Mapping[str, float], alpha_e: float) -> tuple | None:
    """Recognise Michaelis-Menten and Hill laws and return the count-based call, else None.

    ``V*X/(K+X)`` -> ``michaelis(X, alpha_e*V, beta*K)``; ``V*X^h/(K^h+X^h)`` -> ``hill_up``;
    ``V*K^h/(K^h+X^h)`` -> ``hill_down``, with the same arguments (the substitution
    ``X = n/beta`` turns each into the same law of the count n with K scaled by beta).

    Example
    -------
    >>> law = ("/", ("*", ("name", "V"), ("name", "S")), ("+", ("name", "K"), ("name", "S")))
    >>> named_law(law, {"S"}, {"S": 1.0}, 1.0)
    ('call', 'michaelis', (('name', 'S'), ('name', 'V'), ('name', 'K')))
    """
    prod = product(tree)
    sums = [a for a, e in prod.atoms if a[0] == "+" and e == -1]
    if len(sums) != 1 or not math.isfinite(prod.coef):
        return None
    rest = {a: e for a, e in prod.atoms if a != sums[0]}
    left, right = sums[0][1], sums[0][2]
    for k_term, x_term in ((left, right), (right, left)):
        shape = _hill_terms(k_term, x_term, species)
        if shape is None:
            continue
        x, k_base, h = shape
        for law, numerator in (("hill_up", x_term), ("hill_down", k_term)):
            vmax = _divide(rest, product(numerator))
            if vmax is None or any(names(a) & species for a in vmax):
                continue
            if law == "hill_up" and h == ("num", 1.0):
                law = "michaelis"
            vmax_tree = build(alpha_e * prod.coef / product(numerator).coef, vmax)
            k_tree = k_base if beta[x] == 1.0 else _scaled(beta[x], k_base)
            args = (("name", x), vmax_tree, k_tree) + (() if law == "michaelis" else (h,))
            return ("call", law, args)
    return None


def _hill_terms(k_term: tuple, x_term: tuple, species: set[str]) -> tuple[str, tuple, tuple] | None:
    """(species, K, h) when ``x_term`` is X or X**h and ``k_term`` is K or K**h (K species-free)."""
    if x_term[0] == "name" and x_term[1] in species:
        x, h = x_term[1], ("num", 1.0)
        k_base = k_term
    elif x_term[0] == "**" and x_term[1][0] == "name" and x_term[1][1] in species:
        x, h = x_term[1][1], x_term[2]
        if k_term[0] != "**" or k_term[2] != h:
            return None
        k_base = k_term[1]
    else:
        return None
    if names(k_base) & species or names(h) & species:
        return None
    return x, k_base, h


def _divide(atoms: Mapping[tuple, int], by: Product) -> dict[tuple, int] | None:
    """``atoms / by`` when every atom of ``by`` divides out with a matching exponent."""
    out = dict(atoms)
    for a, e in by.atoms:
        if out.get(a, 0) != e:
            return None
        del out[a]
    return out


def _scaled(factor: float, tree: tuple) -> tuple:
    if tree[0] == "num":
        return ("num", factor * tree[1])
    return ("*", ("num", float(factor)), tree)


# ---- general laws ---------------------------------------------------------------------------


def propensity(tree: tuple, species: set[str], beta: Mapping[str, float], alpha_e: float) -> tuple[tuple, bool]:
    """The law as a count-based propensity, and whether a named law was recognised in it.

    Named laws are looked for in the whole law and in the terms of sums and differences
    (``basal + hill``); when none is found the law is converted as one piece (``to_counts``),
    so its operations keep their order.
    """
    named = named_law(tree, species, beta, alpha_e)
    if named is not None:
        return named, True
    if tree[0] in ("+", "-"):
        left, found_left = propensity(tree[1], species, beta, alpha_e)
        right, found_right = propensity(tree[2], species, beta, alpha_e)
        if found_left or found_right:
            return (tree[0], left, right), True
    return to_counts(tree, names(tree) & species, beta, alpha_e), False



def to_counts(tree: tuple, species: set[str], beta: Mapping[str, float], alpha_e: float) -> tuple:
    """``alpha_e * f(n_s / beta_s)``: the law as a propensity of molecule counts."""
    converted = _substitute(tree, {s: ("/", ("name", s), ("num", float(beta[s]))) for s in species
                                   if beta[s] != 1.0})
    if alpha_e == 1.0:
        return converted
    return ("*", ("num", float(alpha_e)), converted)


def _substitute(tree: tuple, env: Mapping[str, tuple]) -> tuple:
    kind = tree[0]
    if kind == "name":
        return env.get(tree[1], tree)
    if kind == "num":
        return tree
    if kind == "call":
        return ("call", tree[1], tuple(_substitute(a, env) for a in tree[2]))
    return (kind, *(_substitute(t, env) for t in tree[1:]))


substitute = _substitute  # public: replace names by trees (initial assignments read species this way)
