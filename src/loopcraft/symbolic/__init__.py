"""The symbolic layer: component symbols, modified nodal analysis and the factored derivation.

``symbols`` (one positive sympy symbol per designator), ``circuit`` (nodal
analysis of R, C, L and op-amp circuits), ``derivation`` (H(s) factored over the
component symbols, once per topology). Sympy runs here and nowhere on the
per-update path.
"""
