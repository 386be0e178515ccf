"""Two-terminal impedance networks written in loopcraft's expression grammar.

Grammar (``||`` binds tighter than ``+``)::

    network  := series
    series   := parallel ( "+" parallel )*      # impedances add
    parallel := atom ( "||" atom )*             # admittances add
    atom     := NAME | "(" series ")"
    NAME     := [RCL][A-Za-z0-9_]*             # reference designator

``R1 || (R3 + C3)`` is R1 in parallel with the series pair R3, C3.
Each element is R (Z = R), C (Z = 1/(sC)) or L (Z = sL); s in rad/s.

Limits (far above any real stage, which has a dozen parts nested two or three
deep; they keep hostile text from exhausting the parser or the solver):

* at most :data:`MAX_PARTS` (64) elements in one expression;
* parentheses nested at most :data:`MAX_NESTING` (32) deep;
* at most :data:`MAX_TEXT` (4096) characters.

Breaking one is a :class:`~loopcraft.errors.ParseError` with a caret under
the offending character.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from functools import cache

import numpy as np
import sympy as sp

from ..errors import ParseError, TopologyError
from ..symbolic.symbols import NAME_RE, S, component_symbol, element_kind

__all__ = ["Network", "Element", "Series", "Parallel", "parse_network", "MAX_PARTS", "MAX_NESTING", "MAX_TEXT"]

#: Most elements in one network expression.
MAX_PARTS = 64
#: Deepest nesting of parentheses in one network expression.
MAX_NESTING = 32
#: Longest network expression, in characters.
MAX_TEXT = 4096


@dataclass(frozen=True)
class Element:
    """A single R, C or L named by its reference designator."""

    name: str

    def to_text(self) -> str:
        """Return the expression text of this node."""
        return self.name

    def names(self) -> tuple[str, ...]:
        """Element names in order of appearance."""
        return (self.name,)

    def impedance_expr(self) -> sp.Expr:
        """Symbolic impedance Z(s) with s in rad/s."""
        x = component_symbol(self.name)
        kind = element_kind(self.name)
        if kind == "resistor":
            return x
        if kind == "capacitor":
            return 1 / (S * x)
        return S * x

    def impedance(self, values: Mapping[str, float], s: np.ndarray) -> np.ndarray:
        """Numeric impedance in ohms at complex frequencies ``s`` (rad/s)."""
        x = values[self.name]
        kind = element_kind(self.name)
        if kind == "resistor":
            return np.full(np.shape(s), complex(x))
        if kind == "capacitor":
            return 1.0 / (s * x)
        return s * x


@dataclass(frozen=True)
class Series:
    """Impedances in series: Z = Z1 + Z2 + …."""

    parts: tuple[Element | Series | Parallel, ...]

    def to_text(self) -> str:
        """Return the expression text of this node."""
        return " + ".join(p.to_text() for p in self.parts)

    def names(self) -> tuple[str, ...]:
        """Element names in order of appearance."""
        return tuple(n for p in self.parts for n in p.names())

    def impedance_expr(self) -> sp.Expr:
        """Symbolic impedance Z(s) with s in rad/s."""
        return sp.Add(*(p.impedance_expr() for p in self.parts))

    def impedance(self, values: Mapping[str, float], s: np.ndarray) -> np.ndarray:
        """Numeric impedance in ohms at complex frequencies ``s`` (rad/s)."""
        return sum((p.impedance(values, s) for p in self.parts), np.zeros(np.shape(s), dtype=complex))


@dataclass(frozen=True)
class Parallel:
    """Impedances in parallel: 1/Z = 1/Z1 + 1/Z2 + …."""

    parts: tuple[Element | Series | Parallel, ...]

    def to_text(self) -> str:
        """Return the expression text of this node."""
        return " || ".join(f"({p.to_text()})" if isinstance(p, Series) else p.to_text() for p in self.parts)

    def names(self) -> tuple[str, ...]:
        """Element names in order of appearance."""
        return tuple(n for p in self.parts for n in p.names())

    def impedance_expr(self) -> sp.Expr:
        """Symbolic impedance Z(s) with s in rad/s."""
        return 1 / sp.Add(*(1 / p.impedance_expr() for p in self.parts))

    def impedance(self, values: Mapping[str, float], s: np.ndarray) -> np.ndarray:
        """Numeric impedance in ohms at complex frequencies ``s`` (rad/s)."""
        return 1.0 / sum((1.0 / p.impedance(values, s) for p in self.parts), np.zeros(np.shape(s), dtype=complex))


Node = Element | Series | Parallel


@dataclass(frozen=True)
class Network:
    """A parsed two-terminal network.

    Parameters
    ----------
    text : str
        The expression as the user wrote it.
    root : Element, Series or Parallel
        The parsed tree.
    """

    text: str
    root: Node

    @classmethod
    def parse(cls, text: str) -> Network:
        """Parse an expression such as ``"R1 || (R3 + C3)"``; see :func:`parse_network`."""
        return parse_network(text)

    @property
    def names(self) -> tuple[str, ...]:
        """Element names in order of appearance."""
        return self.root.names()

    def to_text(self) -> str:
        """Canonical expression text (normalized spacing, minimal parentheses)."""
        return self.root.to_text()

    def impedance_expr(self) -> sp.Expr:
        """Symbolic Z(s) as a single cancelled rational function of s (rad/s)."""
        return _cancelled(self.root)

    def impedance(self, values: Mapping[str, float], s: np.ndarray | complex) -> np.ndarray:
        """Numeric impedance in ohms.

        Parameters
        ----------
        values : mapping of str to float
            Component values in SI base units (ohms, farads, henries).
        s : complex or array of complex
            Complex frequency in rad/s (``s = 2j*pi*f_hz`` on the jω axis).
        """
        missing = [n for n in self.names if n not in values]
        if missing:
            raise TopologyError(f"no value for {', '.join(missing)} in network {self.text!r}")
        return self.root.impedance(values, np.asarray(s, dtype=complex))


@cache
def _cancelled(root: Node) -> sp.Expr:
    return sp.cancel(sp.together(root.impedance_expr()))


class _Parser:
    """Recursive-descent parser for the network grammar."""

    def __init__(self, text: str) -> None:
        self.text = text
        self.pos = 0
        self.depth = 0  # parentheses open around the current position
        self.parts = 0  # elements read so far

    def error(self, message: str, pos: int | None = None) -> ParseError:
        return ParseError(message, self.text, self.pos if pos is None else pos)

    def skip(self) -> None:
        while self.pos < len(self.text) and self.text[self.pos].isspace():
            self.pos += 1

    def peek(self, token: str) -> bool:
        self.skip()
        return self.text.startswith(token, self.pos)

    def parse(self) -> Node:
        self.skip()
        if self.pos >= len(self.text):
            raise self.error("empty network (expected an element such as R1)")
        node = self.series()
        self.skip()
        if self.pos < len(self.text):
            ch = self.text[self.pos]
            if ch == ")":
                raise self.error("unmatched ')'")
            if ch == "|":
                raise self.error("expected '||' for parallel")
            raise self.error(f"unexpected {ch!r} (expected '+', '||' or the end)")
        return node

    def series(self) -> Node:
        parts = [self.parallel()]
        while self.peek("+"):
            self.pos += 1
            parts.append(self.parallel())
        return parts[0] if len(parts) == 1 else Series(tuple(_flatten(parts, Series)))

    def parallel(self) -> Node:
        parts = [self.atom()]
        while True:
            self.skip()
            if self.text.startswith("||", self.pos):
                self.pos += 2
                parts.append(self.atom())
            elif self.text.startswith("|", self.pos):
                raise self.error("a single '|' is not an operator (use '||' for parallel)")
            else:
                break
        return parts[0] if len(parts) == 1 else Parallel(tuple(_flatten(parts, Parallel)))

    def atom(self) -> Node:
        self.skip()
        if self.pos >= len(self.text):
            raise self.error("expression ends here (expected an element or '(')")
        ch = self.text[self.pos]
        if ch == "(":
            open_pos = self.pos
            if self.depth >= MAX_NESTING:
                raise self.error(f"parentheses nested deeper than {MAX_NESTING} levels (the limit)")
            self.depth += 1
            self.pos += 1
            self.skip()
            if self.peek(")"):
                raise self.error("empty parentheses")
            node = self.series()
            self.skip()
            if not self.peek(")"):
                if self.pos >= len(self.text):
                    raise self.error("'(' is never closed", open_pos)
                raise self.error(f"expected ')' to close the '(' at column {open_pos + 1}")
            self.pos += 1
            self.depth -= 1
            return node
        m = NAME_RE.match(self.text, self.pos)
        if m is None or (m.end() < len(self.text) and not _ends_name(self.text[m.end()])):
            if ch.isalpha():
                bad = m.end() if m else self.pos
                if m is None:
                    raise self.error(f"element names start with R, C or L (got {ch!r})")
                raise self.error(f"unexpected {self.text[bad]!r} in element name", bad)
            if ch in "+|":
                raise self.error(f"expected an element or '(' before {ch!r}")
            if ch == ")":
                raise self.error("expected an element or '(' before ')'")
            raise self.error(f"unexpected {ch!r} (expected an element such as R1, C2, L1)")
        if self.parts >= MAX_PARTS:
            raise self.error(f"more than {MAX_PARTS} elements in one network (the limit)")
        self.parts += 1
        self.pos = m.end()
        return Element(m.group(0))


def _ends_name(ch: str) -> bool:
    return ch.isspace() or ch in "+|()"


def _flatten(parts: list[Node], kind: type[Series] | type[Parallel]) -> list[Node]:
    out: list[Node] = []
    for p in parts:
        out.extend(p.parts if isinstance(p, kind) else (p,))
    return out


def parse_network(text: str) -> Network:
    """Parse a network expression.

    Parameters
    ----------
    text : str
        An expression such as ``"(R2 + C1) || C2"``: ``+`` is series, ``||``
        is parallel and binds tighter than ``+``, parentheses group.

    Returns
    -------
    Network

    Raises
    ------
    ParseError
        The expression breaks the grammar; the message shows the text with a
        caret under the offending character.
        An element that appears twice is also a ParseError (a designator
        names exactly one part); the caret marks the second use. So is text
        beyond the limits: more than :data:`MAX_PARTS` elements, parentheses
        nested deeper than :data:`MAX_NESTING`, or more than :data:`MAX_TEXT`
        characters.
    TopologyError
        ``text`` is not a string.

    Examples
    --------
    >>> parse_network("R1 || (R3 + C3)").names
    ('R1', 'R3', 'C3')
    """
    if not isinstance(text, str):
        raise TopologyError(f"a network is text such as 'R1 + C1' (got {type(text).__name__} {text!r})")
    if len(text) > MAX_TEXT:
        raise ParseError(f"network text too long: {len(text)} characters, the limit is {MAX_TEXT} "
                         "(only the first 40 are shown)", text[:40], 40)
    root = _Parser(text).parse()
    names = root.names()
    seen: set[str] = set()
    for n in names:
        if n in seen:
            pos = text.find(n, text.find(n) + len(n))
            raise ParseError(f"element {n!r} appears twice; each designator names one part", text, pos)
        seen.add(n)
    return Network(text, root)
