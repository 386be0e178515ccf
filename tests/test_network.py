import numpy as np
import pytest
import sympy as sp
from hypothesis import given
from hypothesis import strategies as st

from loopcraft.errors import ParseError
from loopcraft.model.network import Element, Parallel, Series, parse_network
from loopcraft.symbolic.symbols import S, component_symbol


def test_precedence_parallel_binds_tighter():
    net = parse_network("R1 + R2 || C1")
    assert net.root == Series((Element("R1"), Parallel((Element("R2"), Element("C1")))))


def test_parentheses_group():
    net = parse_network("(R1 + R2) || C1")
    assert net.root == Parallel((Series((Element("R1"), Element("R2"))), Element("C1")))


def test_symbolic_impedance_type3_input():
    # Z of R1 || (R3 + 1/(s C3)) by hand: R1 (1 + s R3 C3) / (1 + s C3 (R1 + R3)); from memory.
    r1, r3, c3 = (component_symbol(n) for n in ("R1", "R3", "C3"))
    z = parse_network("R1 || (R3 + C3)").impedance_expr()
    expected = r1 * (1 + S * r3 * c3) / (1 + S * c3 * (r1 + r3))
    assert sp.simplify(z - expected) == 0


def test_inductor_impedance():
    l1 = component_symbol("L1")
    assert sp.simplify(parse_network("L1").impedance_expr() - S * l1) == 0


def test_numeric_matches_symbolic():
    net = parse_network("(R2 + C1) || C2 + L_1")
    vals = {"R2": 2.2e4, "C1": 6.8e-9, "C2": 1.5e-10, "L_1": 1e-3}
    s = 2j * np.pi * np.logspace(1, 7, 9)
    f = sp.lambdify(S, net.impedance_expr().subs({component_symbol(k): v for k, v in vals.items()}), "numpy")
    np.testing.assert_allclose(net.impedance(vals, s), f(s), rtol=1e-12)


@pytest.mark.parametrize(
    ("text", "column", "words"),
    [
        ("R1 +", 5, "ends here"),
        ("R1 | C1", 4, "single '|'"),
        ("(R1 + C1", 1, "never closed"),
        ("R1 + X2", 6, "start with R, C or L"),
        ("R1 R2", 4, "unexpected 'R'"),
        ("R1 + R1", 6, "appears twice"),
        ("R1 + ()", 7, "empty parentheses"),
        ("R1 + C1)", 8, "unmatched"),
        ("R1 + r2", 6, "start with R, C or L"),
        ("", 1, "empty network"),
    ],
)
def test_errors_point_at_column(text, column, words):
    with pytest.raises(ParseError, match=words) as exc:
        parse_network(text)
    assert exc.value.position == column - 1
    caret_line = str(exc.value).splitlines()[-1]
    assert caret_line.index("^") - 2 == column - 1


names = st.from_regex(r"[RCL][0-9]{1,2}", fullmatch=True)


@st.composite
def networks(draw, depth=3):
    if depth == 0 or draw(st.booleans()):
        return draw(names)
    op = draw(st.sampled_from([" + ", " || "]))
    parts = draw(st.lists(networks(depth=depth - 1), min_size=2, max_size=3))
    return "(" + op.join(parts) + ")"


@given(networks())
def test_canonical_text_reparses_to_same_tree(text):
    try:
        net = parse_network(text)
    except ParseError as err:
        assert "appears twice" in str(err)
        return
    again = parse_network(net.to_text())
    assert again.root == net.root
    assert again.names == net.names


@given(st.text(alphabet="RCL12+|() x", max_size=12))
def test_parser_never_crashes(text):
    try:
        parse_network(text)
    except ParseError as err:
        assert 0 <= err.position <= len(text)


# --------------------------------------------------------------------------- limits on hostile text
def test_nesting_deeper_than_the_limit_is_a_parse_error_with_a_caret():
    from loopcraft.model.network import MAX_NESTING

    text = "(" * 331 + "R1" + ")" * 331  # deep enough to exhaust the recursive parser without the limit
    with pytest.raises(ParseError, match=f"deeper than {MAX_NESTING} levels") as err:
        parse_network(text)
    assert err.value.position == MAX_NESTING  # the first '(' beyond the limit
    assert parse_network("(" * MAX_NESTING + "R1" + ")" * MAX_NESTING).names == ("R1",)


def test_more_parts_than_the_limit_is_a_parse_error_naming_the_limit():
    from loopcraft.model.network import MAX_PARTS

    ok = "+".join(f"R{i}" for i in range(MAX_PARTS))
    assert len(parse_network(ok).names) == MAX_PARTS
    text = ok + "+C99"
    with pytest.raises(ParseError, match=f"more than {MAX_PARTS} elements") as err:
        parse_network(text)
    assert err.value.position == text.index("C99")


def test_a_series_chain_of_thousands_is_refused_before_any_algebra():
    from loopcraft.model.network import MAX_TEXT

    text = " + ".join(f"R{i}" for i in range(3000))
    with pytest.raises(ParseError, match=f"the limit is {MAX_TEXT}"):
        parse_network(text)


def test_derivation_turns_a_recursion_overflow_into_a_topology_error():
    # A stage nested 12 deep is derived with Python's recursion limit just above the current
    # stack depth: sympy recurses, and the derivation must answer with a package error.
    import inspect
    import sys

    from loopcraft.errors import TopologyError
    from loopcraft.model.stage import InvertingStage
    from loopcraft.symbolic.derivation import derive

    deep = "R_d0" + "".join(f" || (R_d{i} + C_d{i}" for i in range(1, 12)) + ")" * 11
    stage = InvertingStage(parse_network("R_in9"), parse_network(deep))
    limit = sys.getrecursionlimit()
    sys.setrecursionlimit(len(inspect.stack()) + 40)
    try:
        with pytest.raises(TopologyError, match="recursion limit"):
            derive(stage)
    finally:
        sys.setrecursionlimit(limit)
