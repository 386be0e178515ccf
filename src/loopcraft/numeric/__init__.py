"""The numeric layer: compiled evaluation and the normalized factored form.

``evaluator`` (the compiled fast path: values in, poles, zeros and responses
out), ``factors`` (first/second-order factors, roots, cancellations),
``asymptote`` (straight-line and exact Bode), ``factored`` (the factored form
with each corner's formula, for display).
"""
