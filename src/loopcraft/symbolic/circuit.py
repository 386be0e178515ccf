"""Symbolic modified nodal analysis of small R, C, L and op-amp circuits.

A :class:`Circuit` lists two-terminal elements (resistors, capacitors and
inductors named by their reference designators), op-amps given by their
three pins, the node driven by the ideal input voltage source (``Vin``, from
ground) and the node whose voltage is ``Vout``.  Ground is the node ``gnd``.
:meth:`Circuit.transfer` returns ``Vout/Vin`` as a cancelled rational function
of the Laplace variable :data:`loopcraft.symbolic.symbols.S` (rad/s) and the component
symbols.

Model
-----
* Admittances: ``R -> 1/R``, ``C -> s*C``, ``L -> 1/(s*L)``.
* Ideal op-amp (nullor): ``V+ = V-``, no input current, output current free.
* Finite-gain op-amp (``opamp_gain=A``): a voltage-controlled voltage source
  ``Vout = A*(V+ - V-)`` referred to ground, no input current.  ``A`` may be a
  rational function of s, e.g. a single-pole model ``A0*wa/(s + wa)``.

Method
------
Every non-ground node other than the input gets one unknown voltage and one
equation: Kirchhoff's current law for ordinary nodes, the op-amp constraint
for op-amp output nodes (the output current is free, so that KCL row is
dropped).  Each element first gets its own admittance symbol ``y``; the
matrix entries are then integer polynomials, and ``Vout = det(M_out)/det(M)``
by Cramer's rule.  Both determinants are computed fraction-free: a maximum
matching and the strongly connected components of the matrix graph give the
block-triangular form (cascaded op-amp stages decouple into blocks), the
determinant is the product of the block determinants, and each block
determinant is expanded along its rows with memoization on the set of used
columns (sparse and division free; in measurements it beat Bareiss
elimination on every circuit tried, Bareiss remains the fallback for very
large dense blocks).  Each block determinant, which is linear in every
``y``, is mapped to a polynomial in s and the component values by
multiplying it by the impedances ``R`` and ``s*L`` of the elements it
contains.  Common factors are removed block by block with polynomial gcds.
Results are cached per ``(circuit, opamp_gain)``.

Typical first-solve times (one machine, sympy 1.14): a Type III compensator
or a Tow-Thomas biquad 1-30 ms, two cascaded multiple-feedback sections
5-30 ms, three cascaded sections with a symbolic gain ``A`` about 0.3 s, a
nine-section LC ladder (thousands of terms) about 1 s.

Structural rules (checked when a :class:`Circuit` is built)
-----------------------------------------------------------
* node names are non-empty letters, digits and underscores; ground is spelled
  ``gnd`` (other spellings such as ``GND`` are rejected, not silently taken
  as a separate node);
* the input is not ``gnd``; the output is not ``gnd`` and not the input node
  (``H = 1`` identically is a wire, not a stage);
* every node is tied by an element path to ground, the input or an op-amp
  output (an op-amp output is a voltage source referred to ground);
* no element has both ends on one node; designators are unique;
* an op-amp has distinct ``+`` and ``-`` pins, its output is not ``gnd`` or
  the input node, no two op-amps share an output, and its output reaches one
  of its inputs through elements or other op-amps (a feedback path);
* the output is reached from the input through elements and op-amps;
* at most :data:`MAX_ELEMENTS` (64) elements and :data:`MAX_OPAMPS` (16)
  op-amps (far above any real stage; the limits keep hostile input from
  exhausting the solver).

Numerically singular equations and an identically zero transfer function are
found when solving and raise :class:`~loopcraft.errors.TopologyError`.
"""

from __future__ import annotations

import random
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from functools import cache, lru_cache
from typing import Any

import sympy as sp
from sympy.polys.domains import ZZ
from sympy.polys.matrices import DomainMatrix
from sympy.polys.rings import PolyElement, PolyRing

from .._numbers import shown
from ..errors import ComponentValueError, TopologyError
from .symbols import S, component_symbol, element_kind

__all__ = ["GROUND", "NODE_RE", "OpampPins", "Circuit", "MAX_ELEMENTS", "MAX_OPAMPS"]

#: Most R, C and L elements in one circuit.
MAX_ELEMENTS = 64
#: Most op-amps in one circuit.
MAX_OPAMPS = 16

#: The ground node.
GROUND = "gnd"

#: A node name: letters, digits and underscores.
NODE_RE = re.compile(r"[A-Za-z0-9_]+")


def _check_node(value: Any, what: str) -> str:
    """Validate one node name and return it."""
    if not isinstance(value, str) or NODE_RE.fullmatch(value) is None:
        raise TopologyError(
            f"{what}: node name {shown(value)} is not valid; expected non-empty text of "
            "letters, digits and underscores ('gnd' is ground)"
        )
    if value != GROUND and value.lower() == GROUND:
        raise TopologyError(
            f"{what}: node name {value!r} looks like ground; ground is spelled {GROUND!r}"
        )
    return value


@dataclass(frozen=True)
class OpampPins:
    """The three pins of one op-amp, as node names.

    Parameters
    ----------
    plus : str
        Node of the non-inverting input (may be ``"gnd"`` or the input node).
    minus : str
        Node of the inverting input (may be ``"gnd"`` or the input node).
    out : str
        Node of the output (not ``"gnd"``).

    Raises
    ------
    TopologyError
        A malformed node name, ``plus == minus`` or ``out == "gnd"``.
    """

    plus: str
    minus: str
    out: str

    def __post_init__(self) -> None:
        _check_node(self.plus, "op-amp pin 'plus'")
        _check_node(self.minus, "op-amp pin 'minus'")
        _check_node(self.out, "op-amp pin 'out'")
        if self.plus == self.minus:
            raise TopologyError(
                f"op-amp (out={self.out!r}) has both inputs on node {self.plus!r}; "
                "expected distinct '+' and '-' nodes"
            )
        if self.out == GROUND:
            raise TopologyError(
                f"op-amp (plus={self.plus!r}, minus={self.minus!r}) has its output tied to "
                f"{GROUND!r}; expected an output node other than ground"
            )


def _describe_opamp(k: int, pins: OpampPins) -> str:
    return f"op-amp {k + 1} (out={pins.out!r})"


@dataclass(frozen=True)
class Circuit:
    """A linear circuit of R, C, L elements and op-amps, driven by one source.

    Parameters
    ----------
    elements : tuple of (str, str, str)
        ``(designator, node_a, node_b)`` for each element; the designator's
        first letter gives its kind (R in Ω, C in F, L in H).  Lists are
        accepted and stored as tuples.
    opamps : tuple of OpampPins
        The op-amps; ``(plus, minus, out)`` triples are accepted and converted.
    input : str
        Node driven by the ideal voltage source ``Vin`` (referred to ground).
    output : str
        Node whose voltage is ``Vout``.

    Raises
    ------
    ComponentValueError
        A designator that is not R/C/L or is used twice.
    TopologyError
        A structural fault (see the module documentation); the message names
        the node, element or op-amp at fault.
    """

    elements: tuple[tuple[str, str, str], ...]
    opamps: tuple[OpampPins, ...]
    input: str
    output: str

    def __post_init__(self) -> None:
        elements = _normalize_elements(self.elements)
        opamps = _normalize_opamps(self.opamps)
        object.__setattr__(self, "elements", elements)
        object.__setattr__(self, "opamps", opamps)
        _check_node(self.input, "input")
        _check_node(self.output, "output")
        _validate(elements, opamps, self.input, self.output)

    @property
    def component_names(self) -> tuple[str, ...]:
        """Designators in element-list order."""
        return tuple(e[0] for e in self.elements)

    @property
    def nodes(self) -> tuple[str, ...]:
        """Node names other than ``gnd``, in order of first appearance."""
        return tuple(n for n in _all_nodes(self.elements, self.opamps) if n != GROUND)

    def transfer(self, opamp_gain: sp.Expr | float | None = None) -> sp.Expr:
        """Return ``Vout/Vin`` as a cancelled rational function.

        Parameters
        ----------
        opamp_gain : sympy.Expr, int, float or None
            None for ideal op-amps (nullors).  Otherwise the open-loop gain
            ``A`` (dimensionless; may depend on ``s`` in rad/s) of every
            op-amp, each modelled as ``Vout = A*(V+ - V-)``.  Floats are
            converted to exact rationals (shortest decimal form).

        Returns
        -------
        sympy.Expr
            ``N/D`` with ``N`` and ``D`` coprime expanded polynomials in
            :data:`loopcraft.symbolic.symbols.S` (rad/s), the component symbols and
            the symbols of ``opamp_gain``.

        Raises
        ------
        ComponentValueError
            An ``opamp_gain`` that is not a non-zero rational expression.
        TopologyError
            Singular circuit equations or an identically zero transfer.
        """
        num, den = _solve(self, _normalize_gain(opamp_gain))
        return num / den

    def numerator_denominator(
        self, opamp_gain: sp.Expr | float | None = None
    ) -> tuple[sp.Expr, sp.Expr]:
        """Return the numerator and denominator of :meth:`transfer`.

        Parameters
        ----------
        opamp_gain : sympy.Expr, int, float or None
            As for :meth:`transfer`.

        Returns
        -------
        (sympy.Expr, sympy.Expr)
            Expanded polynomials in s (rad/s) with polynomial coefficients in
            the symbols, no common factor, the denominator's leading
            coefficient (highest power of s) positive.

        Raises
        ------
        ComponentValueError, TopologyError
            As for :meth:`transfer`.
        """
        return _solve(self, _normalize_gain(opamp_gain))


# ---------------------------------------------------------------------------
# construction checks


def _normalize_elements(elements: Any) -> tuple[tuple[str, str, str], ...]:
    if isinstance(elements, str) or not isinstance(elements, Iterable):
        raise TopologyError(
            f"elements must be a sequence of (designator, node_a, node_b) (got {shown(elements)})"
        )
    out: list[tuple[str, str, str]] = []
    seen: dict[str, int] = {}
    for i, e in enumerate(elements):
        if i >= MAX_ELEMENTS:
            raise TopologyError(f"more than {MAX_ELEMENTS} elements in one circuit (the limit)")
        if isinstance(e, str) or not isinstance(e, Sequence) or len(e) != 3:
            raise TopologyError(
                f"elements[{i}] = {shown(e)}; expected (designator, node_a, node_b)"
            )
        name, a, b = e
        element_kind(name)  # raises ComponentValueError for a bad designator
        if name in seen:
            raise ComponentValueError(
                f"designator {name!r} is used twice (elements[{seen[name]}] and "
                f"elements[{i}]); expected unique names"
            )
        seen[name] = i
        _check_node(a, f"element {name!r}")
        _check_node(b, f"element {name!r}")
        if a == b:
            raise TopologyError(
                f"element {name!r} has both ends on node {a!r}; expected two different nodes"
            )
        out.append((name, a, b))
    return tuple(out)


def _normalize_opamps(opamps: Any) -> tuple[OpampPins, ...]:
    if isinstance(opamps, str) or not isinstance(opamps, Iterable):
        raise TopologyError(f"opamps must be a sequence of OpampPins (got {shown(opamps)})")
    out: list[OpampPins] = []
    for i, o in enumerate(opamps):
        if i >= MAX_OPAMPS:
            raise TopologyError(f"more than {MAX_OPAMPS} op-amps in one circuit (the limit)")
        if isinstance(o, OpampPins):
            out.append(o)
        elif not isinstance(o, str) and isinstance(o, Sequence) and len(o) == 3:
            out.append(OpampPins(*o))
        else:
            raise TopologyError(f"opamps[{i}] = {shown(o)}; expected OpampPins(plus, minus, out)")
    return tuple(out)


def _all_nodes(
    elements: tuple[tuple[str, str, str], ...], opamps: tuple[OpampPins, ...]
) -> list[str]:
    nodes: dict[str, None] = {}
    for _, a, b in elements:
        nodes[a] = None
        nodes[b] = None
    for o in opamps:
        nodes[o.plus] = None
        nodes[o.minus] = None
        nodes[o.out] = None
    return list(nodes)


def _validate(
    elements: tuple[tuple[str, str, str], ...],
    opamps: tuple[OpampPins, ...],
    inp: str,
    out: str,
) -> None:
    if inp == GROUND:
        raise TopologyError(
            f"input node is {inp!r}; expected a node other than ground (Vin is driven from ground)"
        )
    if out == GROUND:
        raise TopologyError(f"output node is {out!r}; expected a node other than ground")
    if out == inp:
        raise TopologyError(
            f"output node {out!r} is the input node; H = 1 identically, which is not a "
            "stage (expected an output node other than the input)"
        )
    nodes = _all_nodes(elements, opamps)
    if inp not in nodes:
        raise TopologyError(
            f"input node {inp!r} is not connected to any element or op-amp pin; "
            f"expected one of {[n for n in nodes if n != GROUND]!r}"
        )
    if out not in nodes:
        raise TopologyError(
            f"output node {out!r} does not exist; expected one of "
            f"{[n for n in nodes if n != GROUND]!r}"
        )
    owner: dict[str, int] = {}
    for k, o in enumerate(opamps):
        if o.out == inp:
            raise TopologyError(
                f"{_describe_opamp(k, o)} drives the input node {inp!r}, which the source "
                "Vin already fixes; expected another output node"
            )
        if o.out in owner:
            raise TopologyError(
                f"{_describe_opamp(k, o)} shares its output node with "
                f"{_describe_opamp(owner[o.out], opamps[owner[o.out]])}; expected one "
                "op-amp per output node"
            )
        owner[o.out] = k

    adjacency: dict[str, list[str]] = {n: [] for n in nodes}
    for _, a, b in elements:
        adjacency[a].append(b)
        adjacency[b].append(a)

    # Floating nodes: no element path to gnd, the input or an op-amp output.
    anchored = {GROUND, inp, *owner}
    stack = [n for n in nodes if n in anchored]
    seen = set(stack)
    while stack:
        n = stack.pop()
        for m in adjacency[n]:
            if m not in seen:
                seen.add(m)
                stack.append(m)
    floating = [n for n in nodes if n not in seen]
    if floating:
        raise TopologyError(
            f"node {floating[0]!r} is floating: no element path connects it to {GROUND!r}, "
            f"the input {inp!r} or an op-amp output"
            + (f" (also floating: {floating[1:]!r})" if len(floating) > 1 else "")
        )

    fixed = {GROUND, inp}

    def signal_reach(start: str, skip: int | None) -> set[str]:
        """Nodes whose voltage ``start`` can influence (elements and op-amps)."""
        reached = {start}
        driven: set[str] = set()  # op-amp outputs reached through their inputs
        stack = [start]
        while stack:
            n = stack.pop()
            if n != start and (n in fixed or (n in owner and n not in driven)):
                continue  # a stiff voltage blocks propagation through elements
            for m in adjacency[n]:
                if m not in reached:
                    reached.add(m)
                    stack.append(m)
            for k, o in enumerate(opamps):
                if k != skip and n in (o.plus, o.minus) and o.out not in driven:
                    driven.add(o.out)
                    reached.add(o.out)
                    stack.append(o.out)
        # Fixed nodes and op-amp outputs met only through elements are not influenced.
        return {
            n
            for n in reached
            if n == start or not (n in fixed or (n in owner and n not in driven))
        }

    for k, o in enumerate(opamps):
        reached = signal_reach(o.out, skip=k)
        pins = {o.plus, o.minus} - fixed
        if not pins & reached:
            raise TopologyError(
                f"{_describe_opamp(k, o)} has no feedback path: its output does not reach "
                f"its inputs (+ = {o.plus!r}, - = {o.minus!r}) through elements or other "
                "op-amps, so its equations are singular; expected a feedback element "
                "from the output to an input"
            )

    if out not in signal_reach(inp, skip=None):
        raise TopologyError(
            f"output node {out!r} is not reached from the input {inp!r} through elements "
            "or op-amps, so the transfer function is identically zero"
        )


# ---------------------------------------------------------------------------
# op-amp gain


def _normalize_gain(gain: Any) -> sp.Expr | None:
    if gain is None:
        return None
    if isinstance(gain, bool) or not isinstance(gain, int | float | sp.Expr):
        raise ComponentValueError(
            f"opamp_gain = {gain!r}; expected None (ideal) or a sympy expression or number"
        )
    return _normalize_gain_value(gain)


@lru_cache(maxsize=256)
def _normalize_gain_value(gain: int | float | sp.Expr) -> sp.Expr:
    if isinstance(gain, float):
        expr: sp.Expr = sp.Float(gain)
    elif isinstance(gain, int):
        expr = sp.Integer(gain)
    else:
        expr = gain
    floats = expr.atoms(sp.Float)
    if floats:
        expr = expr.xreplace({f: sp.Rational(repr(float(f))) for f in floats})
    if expr.has(sp.oo, -sp.oo, sp.zoo, sp.nan):
        raise ComponentValueError(
            f"opamp_gain = {gain!r} is not finite; use opamp_gain=None for ideal op-amps"
        )
    num, den = sp.fraction(sp.cancel(sp.together(expr)))
    syms = sorted(expr.free_symbols, key=sp.default_sort_key)
    if not (num.is_polynomial(*syms) and den.is_polynomial(*syms)):
        raise ComponentValueError(
            f"opamp_gain = {gain!r}; expected a rational function of its symbols"
        )
    if num == 0:
        raise ComponentValueError(f"opamp_gain = {gain!r} is zero; expected a non-zero gain")
    return sp.cancel(expr)


def _gain_polys(
    gain: sp.Expr, yring: PolyRing, gain_syms: Sequence[sp.Symbol]
) -> tuple[PolyElement, PolyElement]:
    """Integer polynomials ``(n, d)`` in ``yring`` with ``gain = n/d``."""
    num, den = sp.fraction(sp.cancel(sp.together(gain)))
    gens = tuple(gain_syms) or (sp.Dummy("one"),)
    pn = sp.Poly(num, *gens, domain="QQ")
    pd = sp.Poly(den, *gens, domain="QQ")
    cn, pn = pn.clear_denoms(convert=True)
    cd, pd = pd.clear_denoms(convert=True)
    n_gain = len(gain_syms)
    offset = len(yring.gens) - n_gain

    def to_ring(p: sp.Poly, factor: Any) -> PolyElement:
        terms = {}
        for monom, coeff in p.terms():
            e = [0] * len(yring.gens)
            for i in range(n_gain):
                e[offset + i] = monom[i]
            terms[tuple(e)] = ZZ(int(coeff) * int(factor))
        return yring.from_dict(terms)

    # gain = (pn/cn)/(pd/cd) = (pn*cd)/(pd*cn)
    return to_ring(pn, cd), to_ring(pd, cn)


# ---------------------------------------------------------------------------
# sparse fraction-free determinant


class _Singular(Exception):  # noqa: N818 - internal control flow, never escapes
    """Raised inside the solver when a determinant is identically zero."""

    def __init__(self, rows: list[int], cols: list[int]) -> None:
        super().__init__()
        self.rows = rows
        self.cols = cols


def _max_matching(n: int, rows: list[dict[int, Any]]) -> list[int]:
    """Row -> column maximum matching (augmenting paths); -1 when unmatched."""
    match_col = [-1] * n  # column -> row
    match_row = [-1] * n  # row -> column

    def augment(r: int, visited: set[int]) -> bool:
        for c in rows[r]:
            if c in visited:
                continue
            visited.add(c)
            if match_col[c] < 0 or augment(match_col[c], visited):
                match_col[c] = r
                match_row[r] = c
                return True
        return False

    for r in range(n):
        # cheap greedy pass first
        for c in rows[r]:
            if match_col[c] < 0:
                match_col[c] = r
                match_row[r] = c
                break
    for r in range(n):
        if match_row[r] < 0:
            augment(r, set())
    return match_row


def _underdetermined(n: int, rows: list[dict[int, Any]], match_row: list[int]) -> tuple[
    list[int], list[int]
]:
    """Rows and columns reachable by alternating paths from unmatched columns."""
    match_col = [-1] * n
    for r, c in enumerate(match_row):
        if c >= 0:
            match_col[c] = r
    col_rows: list[list[int]] = [[] for _ in range(n)]
    for r in range(n):
        for c in rows[r]:
            col_rows[c].append(r)
    cols = [c for c in range(n) if match_col[c] < 0]
    seen_c = set(cols)
    seen_r: set[int] = set()
    stack = list(cols)
    while stack:
        c = stack.pop()
        for r in col_rows[c]:
            if r not in seen_r:
                seen_r.add(r)
                c2 = match_row[r]
                if c2 >= 0 and c2 not in seen_c:
                    seen_c.add(c2)
                    stack.append(c2)
    unmatched_rows = [r for r in range(n) if match_row[r] < 0]
    return sorted(seen_r | set(unmatched_rows)), sorted(seen_c)


def _tarjan(n: int, succ: list[list[int]]) -> list[list[int]]:
    """Strongly connected components (iterative Tarjan)."""
    index = [-1] * n
    low = [0] * n
    on_stack = [False] * n
    stack: list[int] = []
    comps: list[list[int]] = []
    counter = 0
    for root in range(n):
        if index[root] >= 0:
            continue
        work = [(root, 0)]
        while work:
            v, i = work.pop()
            if i == 0:
                index[v] = low[v] = counter
                counter += 1
                stack.append(v)
                on_stack[v] = True
            recurse = False
            for j in range(i, len(succ[v])):
                w = succ[v][j]
                if index[w] < 0:
                    work.append((v, j + 1))
                    work.append((w, 0))
                    recurse = True
                    break
                if on_stack[w]:
                    low[v] = min(low[v], index[w])
            if recurse:
                continue
            if low[v] == index[v]:
                comp = []
                while True:
                    w = stack.pop()
                    on_stack[w] = False
                    comp.append(w)
                    if w == v:
                        break
                comps.append(comp)
            if work:
                u = work[-1][0]
                low[u] = min(low[u], low[v])
    return comps


def _perm_sign(perm: list[int]) -> int:
    sign = 1
    seen = [False] * len(perm)
    for i in range(len(perm)):
        if seen[i]:
            continue
        j = i
        length = 0
        while not seen[j]:
            seen[j] = True
            j = perm[j]
            length += 1
        if length % 2 == 0:
            sign = -sign
    return sign


#: Largest number of partial-expansion states for which a block determinant
#: is expanded by rows (division free, sparse); denser blocks use Bareiss.
_EXPANSION_STATE_LIMIT = 32768


def _row_order(sub: list[dict[int, PolyElement]]) -> list[int]:
    """Greedy row order that keeps few columns open in the expansion."""
    left = set(range(len(sub)))
    used: set[int] = set()
    order = []
    while left:
        r = min(left, key=lambda i: (len(set(sub[i]) - used), len(sub[i]), i))
        left.remove(r)
        used |= set(sub[r])
        order.append(r)
    return order


def _expansion_states(sub: list[dict[int, PolyElement]], order: list[int]) -> int:
    """Total number of partial states of the row expansion (structure only)."""
    masks = {0}
    total = 0
    for r in order:
        masks = {m | (1 << c) for m in masks for c in sub[r] if not m & (1 << c)}
        total += len(masks)
        if total > _EXPANSION_STATE_LIMIT:
            break
    return total


def _expansion_det(
    sub: list[dict[int, PolyElement]], order: list[int], zero: PolyElement
) -> PolyElement:
    """Expand the determinant along rows, memoized on the set of used columns.

    Visiting row ``order[k]`` and choosing column ``c`` adds the inversions
    with the columns already used; the sign of ``order`` itself is applied at
    the end.  Only products and sums: no division, no fill-in.
    """
    states: dict[int, PolyElement] = {0: zero + 1}
    for r in order:
        new: dict[int, PolyElement] = {}
        for mask, value in states.items():
            for c, a in sub[r].items():
                bit = 1 << c
                if mask & bit:
                    continue
                term = value * a
                if (mask >> (c + 1)).bit_count() & 1:
                    term = -term
                key = mask | bit
                new[key] = new[key] + term if key in new else term
        states = {m: v for m, v in new.items() if v}
    det = states.get((1 << len(sub)) - 1, zero)
    return det if _perm_sign(order) > 0 else -det


def _block_det(
    block: list[int], match_row: list[int], rows: list[dict[int, PolyElement]], yring: PolyRing
) -> PolyElement:
    cols = [match_row[r] for r in block]
    zero = yring.zero
    if len(block) == 1:
        return rows[block[0]][cols[0]]
    local = {c: j for j, c in enumerate(cols)}
    sub = [{local[c]: v for c, v in rows[r].items() if c in local} for r in block]
    if len(block) == 2:
        g = sub[0].get
        h = sub[1].get
        return g(0, zero) * h(1, zero) - g(1, zero) * h(0, zero)
    order = _row_order(sub)
    if _expansion_states(sub, order) <= _EXPANSION_STATE_LIMIT:
        return _expansion_det(sub, order, zero)
    dense = [[row.get(j, zero) for j in range(len(block))] for row in sub]
    return DomainMatrix(dense, (len(block), len(block)), yring.to_domain()).det()


def _sparse_det(
    n: int, rows: list[dict[int, PolyElement]], yring: PolyRing
) -> tuple[int, list[PolyElement]]:
    """Return ``(sign, factors)`` with ``det = sign * prod(factors)``.

    Raises
    ------
    _Singular
        When the determinant is identically zero; carries the rows and
        columns at fault.
    """
    if n == 0:
        return 1, []
    match_row = _max_matching(n, rows)
    if min(match_row) < 0:
        bad_rows, bad_cols = _underdetermined(n, rows, match_row)
        raise _Singular(bad_rows, bad_cols)
    col_owner = [0] * n
    for r, c in enumerate(match_row):
        col_owner[c] = r
    succ = [[col_owner[c] for c in rows[r] if col_owner[c] != r] for r in range(n)]
    factors = []
    for block in _tarjan(n, succ):
        d = _block_det(block, match_row, rows, yring)
        if not d:
            raise _Singular(sorted(block), sorted(match_row[r] for r in block))
        factors.append(d)
    return _perm_sign(match_row), factors


# ---------------------------------------------------------------------------
# solver


def _singular_error(
    circuit: Circuit,
    unknowns: list[str],
    rows: list[dict[int, PolyElement]],
    yring: PolyRing,
    err: _Singular,
    ideal: bool,
) -> TopologyError:
    """Explain a singular system: which equations, which node voltages."""
    bad_rows, bad_cols = err.rows, err.cols
    # Pin the dependency down at a random (generic) point of the symbols:
    # the right null space names the free voltages, the left one the equations.
    rng = random.Random(1729)
    point = [rng.randint(2, 997) for _ in yring.gens]
    n = len(unknowns)
    full = sp.Matrix([[int(rows[r][c](*point)) if c in rows[r] else 0 for c in range(n)]
                      for r in range(n)])
    right = full.nullspace()
    left = full.T.nullspace()
    if right and left:
        bad_cols = [c for c in range(n) if any(v[c] != 0 for v in right)]
        bad_rows = [r for r in range(n) if any(v[r] != 0 for v in left)]
    by_out = {o.out: k for k, o in enumerate(circuit.opamps)}
    labels = []
    culprit = None
    for r in bad_rows:
        node = unknowns[r]
        if node in by_out:
            k = by_out[node]
            what = _describe_opamp(k, circuit.opamps[k])
            culprit = culprit or what
            labels.append(f"{what}: {'V+ = V-' if ideal else 'Vout = A*(V+ - V-)'}")
        else:
            labels.append(f"KCL at node {node!r}")
    lead = f"{culprit} equations are singular" if culprit else "the circuit equations are singular"
    nodes = [unknowns[c] for c in bad_cols]
    model = "ideal" if ideal else "finite-gain"
    return TopologyError(
        f"{lead} ({model} op-amps): the voltages at nodes {nodes!r} are not determined; "
        f"dependent equations: [{'; '.join(labels)}]; expected a circuit with a unique "
        "solution (check for missing feedback or a network that balances out)"
    )


@cache
def _y_symbols(count: int) -> tuple[sp.Dummy, ...]:
    """One admittance symbol per element (reused, so polynomial rings are reused)."""
    return tuple(sp.Dummy(f"y{e}") for e in range(count))


@lru_cache(maxsize=512)
def _solve(circuit: Circuit, gain: sp.Expr | None) -> tuple[sp.Expr, sp.Expr]:
    """Solve once per (circuit, gain): return ``(numerator, denominator)`` of ``Vout/Vin``."""
    elements = circuit.elements
    inp = circuit.input
    unknowns = [n for n in circuit.nodes if n != inp]
    index = {n: i for i, n in enumerate(unknowns)}
    n = len(unknowns)

    gain_syms: list[sp.Symbol] = []
    if gain is not None:
        gain_syms = sorted(gain.free_symbols, key=sp.default_sort_key)
    yring = PolyRing(_y_symbols(len(elements)) + tuple(gain_syms), ZZ)
    ygens = yring.gens

    rows: list[dict[int, PolyElement]] = [{} for _ in range(n)]
    rhs: dict[int, PolyElement] = {}

    def add(table: dict[int, PolyElement], col: int, value: PolyElement) -> None:
        v = table.get(col, yring.zero) + value
        if v:
            table[col] = v
        else:
            table.pop(col, None)

    opamp_rows = {o.out for o in circuit.opamps}
    for e, (_, a, b) in enumerate(elements):
        y = ygens[e]
        for here, there in ((a, b), (b, a)):
            if here not in index or here in opamp_rows:
                continue
            r = index[here]
            add(rows[r], r, y)
            if there in index:
                add(rows[r], index[there], -y)
            elif there == inp:
                add(rhs, r, y)

    if gain is None:
        g_num, g_den = yring.one, yring.zero
    else:
        g_num, g_den = _gain_polys(gain, yring, gain_syms)
    for o in circuit.opamps:
        r = index[o.out]
        # ideal: V+ - V- = 0;  finite: d*Vout - n*(V+ - V-) = 0
        coeffs = [(o.plus, -g_num), (o.minus, g_num)] if gain is not None else [
            (o.plus, yring.one),
            (o.minus, -yring.one),
        ]
        if gain is not None:
            coeffs.append((o.out, g_den))
        for node, c in coeffs:
            if node in index:
                add(rows[r], index[node], c)
            elif node == inp:
                add(rhs, r, -c)

    try:
        sign_d, den_factors = _sparse_det(n, rows, yring)
    except _Singular as err:
        raise _singular_error(circuit, unknowns, rows, yring, err, ideal=gain is None) from None

    k = index[circuit.output]
    rows_k = [dict(row) for row in rows]
    for r in range(n):
        rows_k[r].pop(k, None)
        if r in rhs:
            rows_k[r][k] = rhs[r]
    try:
        sign_n, num_factors = _sparse_det(n, rows_k, yring)
    except _Singular:
        raise TopologyError(
            f"the transfer function to output node {circuit.output!r} is identically zero: "
            "the output does not respond to the input (a virtual ground, a balanced bridge "
            "or a path that cancels); expected a node that carries the signal"
        ) from None

    return _to_expressions(circuit, gain_syms, yring, sign_n * sign_d, num_factors, den_factors)


def _to_expressions(
    circuit: Circuit,
    gain_syms: list[sp.Symbol],
    yring: PolyRing,
    sign: int,
    num_factors: list[PolyElement],
    den_factors: list[PolyElement],
) -> tuple[sp.Expr, sp.Expr]:
    """Map y-polynomials to polynomials in s and the components; cancel; convert."""
    elements = circuit.elements
    n_el = len(elements)
    comp_syms = [component_symbol(name) for name, _, _ in elements]
    extra = [g for g in gain_syms if g != S and g not in comp_syms]
    tgens = (S, *comp_syms, *extra)
    tring = PolyRing(tgens, ZZ)
    n_t = len(tgens)
    kinds = [element_kind(name)[0] for name, _, _ in elements]  # 'r', 'c', 'i'
    gain_pos = [tgens.index(g) for g in gain_syms]

    def mapped(p: PolyElement) -> tuple[PolyElement, list[int]]:
        """``p`` times the impedances of its R/L symbols, and that monomial."""
        deg = [0] * n_el
        for monom in p.itermonoms():
            for e in range(n_el):
                if monom[e] > deg[e]:
                    deg[e] = monom[e]
        scale = [0] * n_t
        for e in range(n_el):
            if kinds[e] != "c" and deg[e]:
                scale[1 + e] += deg[e]
                if kinds[e] == "i":
                    scale[0] += deg[e]
        terms: dict[tuple[int, ...], int] = {}
        for monom, coeff in p.iterterms():
            ex = [0] * n_t
            for e in range(n_el):
                m = monom[e]
                if kinds[e] == "c":
                    if m:
                        ex[0] += m
                        ex[1 + e] += m
                else:
                    left = deg[e] - m
                    if left:
                        ex[1 + e] += left
                        if kinds[e] == "i":
                            ex[0] += left
            for i, pos in enumerate(gain_pos):
                ex[pos] += monom[n_el + i]
            key = tuple(ex)
            terms[key] = terms.get(key, 0) + coeff
        return tring.from_dict({m: c for m, c in terms.items() if c}), scale

    nums: list[PolyElement] = []
    dens: list[PolyElement] = []
    balance = [0] * n_t  # exponents: + goes to the numerator, - to the denominator
    for p in num_factors:
        q, scale = mapped(p)
        nums.append(q)
        balance = [b - s_ for b, s_ in zip(balance, scale, strict=True)]
    for p in den_factors:
        q, scale = mapped(p)
        dens.append(q)
        balance = [b + s_ for b, s_ in zip(balance, scale, strict=True)]
    up = tuple(max(b, 0) for b in balance)
    down = tuple(max(-b, 0) for b in balance)
    if any(up):
        nums.append(tring.from_dict({up: 1}))
    if any(down):
        dens.append(tring.from_dict({down: 1}))

    for i in range(len(nums)):
        for j in range(len(dens)):
            _, nums[i], dens[j] = nums[i].cofactors(dens[j])
    num = tring.from_dict({(0,) * n_t: sign})
    for q in nums:
        num = num * q
    den = tring.one
    for q in dens:
        den = den * q
    if den.LC < 0:
        num, den = -num, -den
    return num.as_expr(), den.as_expr()
