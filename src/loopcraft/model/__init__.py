"""The model layer: what a design *is*, parsed and validated, with no analysis.

``values`` (engineering values), ``network`` (the impedance-network grammar),
``stage`` (inverting, non-inverting and circuit stages), ``opamp`` and ``plant``
(amplifier and plant models), ``topologies`` (the library of ready stages).
Depends only on :mod:`loopcraft.errors` and the private helpers; nothing here
imports the layers above.
"""
