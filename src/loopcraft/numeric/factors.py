r"""The numeric normalized factored form shared by stages, plants and loops.

A transfer function in normalized factored form is

.. math::

    H(s) = K \, s^{n} \,
        \frac{\prod_z (1 \pm s/\omega_z) \prod_{z2} (1 \pm s/(Q\omega_0) + s^2/\omega_0^2)}
              {\prod_p (1 \pm s/\omega_p) \prod_{p2} (1 \pm s/(Q\omega_0) + s^2/\omega_0^2)}

with ``+`` for left-half-plane roots and ``-`` for right-half-plane roots,
``n > 0`` for zeros at the origin and ``n < 0`` for poles at the origin.
All frequencies are angular, in rad/s.

A pair of roots on the jω axis (zero damping, a lossless resonance or an
exact notch) has ``Q = math.inf``; roots whose real part is within
:data:`JW_AXIS_REL_TOL` of their magnitude count as on the axis.

A zero and a pole that coincide cancel in H(s) without changing the response;
:func:`cancel_roots` finds such pairs (exact, or within :data:`CANCEL_REL_TOL`
of the root magnitude) and :func:`drop_cancelled` removes their factors.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field

import numpy as np

from ..errors import AnalysisError

__all__ = [
    "CANCEL_REL_TOL",
    "JW_AXIS_REL_TOL",
    "Cancellation",
    "Factor",
    "FactoredNumeric",
    "cancel_roots",
    "drop_cancelled",
    "factors_from_roots",
    "factored_from_tf",
    "polynomial_roots",
]

#: A zero z and a pole p cancel when ``|z - p| <= CANCEL_REL_TOL · max(|z|, |p|)``.
#: 1e-9 is far above the relative error of the computed roots (about 1e-15 for simple
#: roots, see :func:`polynomial_roots`) and far below any difference a part tolerance
#: or a slider step can make, so only coincidences of the design itself are cancelled.
CANCEL_REL_TOL = 1e-9

#: A complex pair whose real part is within ``JW_AXIS_REL_TOL · |root|`` of zero lies on
#: the jω axis: zero damping, Q = ∞ (rather than the Q ≈ 1e16 of rounding noise).
#: It stands for Q > 1/(2·JW_AXIS_REL_TOL) = 5e11, beyond any damping parts can set
#: and beyond what the computed roots resolve.
JW_AXIS_REL_TOL = 1e-12


@dataclass(frozen=True)
class Factor:
    """One first- or second-order factor of the normalized factored form.

    Parameters
    ----------
    role : {"zero", "pole"}
        Whether the factor sits in the numerator or the denominator.
    order : {1, 2}
        1 for ``(1 ± s/ω)``, 2 for ``(1 ± s/(Q·ω0) + s²/ω0²)``.
    omega_rad_s : float
        Corner frequency ω (order 1) or natural frequency ω0 (order 2), rad/s, > 0.
    q : float or None
        Quality factor Q of a second-order factor (> 0; ``math.inf`` for a
        pair on the jω axis); None for order 1.
    rhp : bool
        True when the root(s) lie in the right half plane (the ``-`` sign);
        always False for a pair on the jω axis.
    formula : str or None
        The corner (ω or ω0) as a formula in the component symbols, when the
        polynomial factors over the symbols; None when only numeric.
    q_formula : str or None
        Q as a formula in the component symbols (order 2 only).
    """

    role: str
    order: int
    omega_rad_s: float
    q: float | None = None
    rhp: bool = False
    formula: str | None = None
    q_formula: str | None = None

    def __post_init__(self) -> None:
        if self.role not in ("zero", "pole"):
            raise AnalysisError(f"factor role must be 'zero' or 'pole' (got {self.role!r})")
        if self.order not in (1, 2):
            raise AnalysisError(f"factor order must be 1 or 2 (got {self.order!r})")
        if not (math.isfinite(self.omega_rad_s) and self.omega_rad_s > 0):
            raise AnalysisError(f"factor frequency must be finite and > 0 rad/s (got {self.omega_rad_s!r})")
        if self.order == 2:
            if self.q is None or not (self.q > 0):  # math.inf: a pair on the jω axis
                raise AnalysisError(f"second-order factor needs Q > 0, or inf on the jω axis (got {self.q!r})")
            if math.isinf(self.q) and self.rhp:
                raise AnalysisError("a pair on the jω axis (Q = inf) lies in neither half plane; rhp must be False")
        elif self.q is not None:
            raise AnalysisError("a first-order factor has no Q")

    @property
    def f_hz(self) -> float:
        """Corner or natural frequency in Hz."""
        return self.omega_rad_s / (2.0 * math.pi)

    @property
    def on_jw_axis(self) -> bool:
        """True for a second-order factor with zero damping (Q = ∞, roots ±jω0)."""
        return self.order == 2 and self.q is not None and math.isinf(self.q)

    @property
    def coefficients(self) -> tuple[float, ...]:
        """Normalized coefficients ``(1, c1, c2)`` in ascending powers of s (rad/s)."""
        sign = -1.0 if self.rhp else 1.0
        if self.order == 1:
            return (1.0, sign / self.omega_rad_s)
        assert self.q is not None
        return (1.0, sign / (self.q * self.omega_rad_s), 1.0 / self.omega_rad_s**2)

    def roots(self) -> np.ndarray:
        """Roots of the factor in rad/s (complex array of length ``order``)."""
        w = self.omega_rad_s
        sign = 1.0 if self.rhp else -1.0
        if self.order == 1:
            return np.array([sign * w], dtype=complex)
        assert self.q is not None
        zeta = 1.0 / (2.0 * self.q)
        if zeta < 1.0:
            im = w * math.sqrt(1.0 - zeta * zeta)
            re = sign * zeta * w
            return np.array([complex(re, im), complex(re, -im)])
        # Two real roots; compute the small one without cancellation.
        d = math.sqrt(zeta * zeta - 1.0)
        big = w * (zeta + d)
        small = w * w / big
        return np.array([sign * big, sign * small], dtype=complex)

    def evaluate(self, s: np.ndarray) -> np.ndarray:
        """Value of the factor at complex frequencies ``s`` (rad/s)."""
        c = self.coefficients
        s = np.asarray(s, dtype=complex)
        if self.order == 1:
            return 1.0 + c[1] * s
        return 1.0 + s * (c[1] + c[2] * s)


@dataclass(frozen=True)
class FactoredNumeric:
    """A transfer function as gain, origin order and first/second-order factors.

    Parameters
    ----------
    gain : float
        The constant K (units of (rad/s)^(-n) when ``origin_order`` is n).
    origin_order : int
        n: > 0 for zeros at the origin, < 0 for poles at the origin.
    factors : tuple of Factor
        The remaining factors, each normalized to 1 at s = 0.
    gain_formula : str or None
        K as a formula in the component symbols, when known.
    """

    gain: float
    origin_order: int = 0
    factors: tuple[Factor, ...] = field(default_factory=tuple)
    gain_formula: str | None = None

    @property
    def zeros(self) -> tuple[Factor, ...]:
        """The numerator factors."""
        return tuple(f for f in self.factors if f.role == "zero")

    @property
    def poles(self) -> tuple[Factor, ...]:
        """The denominator factors."""
        return tuple(f for f in self.factors if f.role == "pole")

    def zero_roots(self) -> np.ndarray:
        """All zeros in rad/s, origin zeros included (complex array)."""
        return self._roots("zero", max(self.origin_order, 0))

    def pole_roots(self) -> np.ndarray:
        """All poles in rad/s, origin poles included (complex array)."""
        return self._roots("pole", max(-self.origin_order, 0))

    def _roots(self, role: str, n_origin: int) -> np.ndarray:
        parts = [np.zeros(n_origin, dtype=complex)]
        parts += [f.roots() for f in self.factors if f.role == role]
        return np.concatenate(parts)

    def evaluate(self, s: np.ndarray) -> np.ndarray:
        """Value of the transfer function at complex frequencies ``s`` (rad/s)."""
        s = np.asarray(s, dtype=complex)
        out = np.full(s.shape, complex(self.gain))
        if self.origin_order:
            out = out * s**self.origin_order
        for f in self.factors:
            v = f.evaluate(s)
            out = out * v if f.role == "zero" else out / v
        return out

    def response(self, f_hz: np.ndarray) -> np.ndarray:
        """Complex frequency response at ``f_hz`` (Hz); evaluated at s = j·2π·f."""
        return self.evaluate(2j * np.pi * np.asarray(f_hz, dtype=float))

    def tf(self) -> tuple[np.ndarray, np.ndarray]:
        """(num, den) coefficients in descending powers of s (rad/s).

        Built by multiplying the normalized factor polynomials, so no roots are
        turned back into coefficients.
        """
        num = np.array([self.gain])
        den = np.array([1.0])
        for f in self.factors:
            poly = np.array(f.coefficients[::-1])
            if f.role == "zero":
                num = np.convolve(num, poly)
            else:
                den = np.convolve(den, poly)
        n = self.origin_order
        if n > 0:
            num = np.concatenate([num, np.zeros(n)])
        elif n < 0:
            den = np.concatenate([den, np.zeros(-n)])
        return num, den

    def inverse(self) -> FactoredNumeric:
        """1/H: zeros and poles swap roles."""
        swap = {"zero": "pole", "pole": "zero"}
        fs = tuple(
            Factor(swap[f.role], f.order, f.omega_rad_s, f.q, f.rhp, f.formula, f.q_formula) for f in self.factors
        )
        return FactoredNumeric(1.0 / self.gain, -self.origin_order, fs)

    def scaled(self, k: float) -> FactoredNumeric:
        """The same transfer function multiplied by the constant ``k``."""
        return FactoredNumeric(self.gain * k, self.origin_order, self.factors, self.gain_formula)

    def __mul__(self, other: FactoredNumeric) -> FactoredNumeric:
        """Product of two transfer functions (factors concatenated, no cancellation)."""
        if not isinstance(other, FactoredNumeric):
            return NotImplemented
        return FactoredNumeric(
            self.gain * other.gain,
            self.origin_order + other.origin_order,
            self.factors + other.factors,
        )


def _real_factors_from_roots(roots: Iterable[complex], role: str, rel_tol: float) -> tuple[list[Factor], int]:
    """Group roots into first/second-order factors; return (factors, origin count)."""
    factors: list[Factor] = []
    origin = 0
    pending = [complex(r) for r in roots]
    scale = max([abs(r) for r in pending] + [0.0])
    tiny = scale * 1e-13
    reals: list[float] = []
    cplx: list[complex] = []
    for r in pending:
        if abs(r) <= tiny:
            origin += 1
        elif abs(r.imag) <= rel_tol * abs(r):
            reals.append(r.real)
        else:
            cplx.append(r)
    for x in reals:
        factors.append(Factor(role, 1, abs(x), rhp=x > 0))
    upper = [r for r in cplx if r.imag > 0]
    lower = [r for r in cplx if r.imag < 0]
    if len(upper) != len(lower):
        raise AnalysisError("complex roots do not come in conjugate pairs; coefficients must be real")
    for r in upper:
        w0 = abs(r)
        if abs(r.real) <= JW_AXIS_REL_TOL * w0:
            factors.append(Factor(role, 2, w0, q=math.inf))  # on the jω axis: zero damping
            continue
        factors.append(Factor(role, 2, w0, q=w0 / (2.0 * abs(r.real)), rhp=r.real > 0))
    return factors, origin


def factors_from_roots(
    zeros: Sequence[complex],
    poles: Sequence[complex],
    gain: float,
    *,
    rel_tol: float = 1e-9,
) -> FactoredNumeric:
    """Build the normalized factored form from roots and a normalized gain.

    Parameters
    ----------
    zeros, poles : sequence of complex
        Roots in rad/s. Complex roots must come in conjugate pairs.
    gain : float
        The normalized gain K of the factored form (not the zpk leading gain).
    rel_tol : float
        A root whose imaginary part is below ``rel_tol·|root|`` counts as real.

    Returns
    -------
    FactoredNumeric
    """
    zf, nz = _real_factors_from_roots(zeros, "zero", rel_tol)
    pf, npl = _real_factors_from_roots(poles, "pole", rel_tol)
    return FactoredNumeric(float(gain), nz - npl, tuple(zf + pf))


@dataclass(frozen=True)
class Cancellation:
    """Zeros and poles with the coinciding zero/pole pairs taken out.

    Parameters
    ----------
    zeros, poles : ndarray of complex
        The reduced roots, rad/s, in their input order.
    pairs : tuple of (complex, complex)
        Each cancelled (zero, pole) pair, rad/s; a complex pair cancels as two
        entries, one per conjugate.
    """

    zeros: np.ndarray
    poles: np.ndarray
    pairs: tuple[tuple[complex, complex], ...] = ()

    @property
    def cancelled(self) -> np.ndarray:
        """The cancelled poles, rad/s (complex; the mode each cancellation hides)."""
        return np.array([p for _z, p in self.pairs], dtype=complex)


def _half(r: complex, real_tol: float) -> int:
    """0 for a real root (or the origin), +1 upper and -1 lower half plane."""
    if abs(r.imag) <= real_tol * abs(r):
        return 0
    return 1 if r.imag > 0 else -1


def _mate(roots: np.ndarray, used: set[int], target: complex, half: int, real_tol: float) -> int | None:
    """Index of the unused root of ``half`` nearest ``target`` (the conjugate partner)."""
    best: tuple[float, int] | None = None
    for k, r in enumerate(roots):
        if k in used or _half(complex(r), real_tol) != half:
            continue
        d = abs(complex(r) - target)
        if best is None or d < best[0]:
            best = (d, k)
    return None if best is None else best[1]


def cancel_roots(
    zeros: Sequence[complex],
    poles: Sequence[complex],
    *,
    rel_tol: float = CANCEL_REL_TOL,
    real_tol: float = 1e-9,
) -> Cancellation:
    """Take out the zero/pole pairs that coincide (exactly or within ``rel_tol``).

    Parameters
    ----------
    zeros, poles : sequence of complex
        Roots in rad/s; complex roots come in conjugate pairs.
    rel_tol : float
        A zero z and a pole p cancel when ``|z - p| <= rel_tol · max(|z|, |p|)``
        (two roots at the origin always cancel). Default :data:`CANCEL_REL_TOL`.
    real_tol : float
        A root whose imaginary part is within ``real_tol·|root|`` counts as real,
        as in :func:`factors_from_roots`.

    Returns
    -------
    Cancellation
        The reduced zeros and poles and the cancelled pairs.

    Notes
    -----
    Only a real zero cancels a real pole, and a complex pair cancels a complex
    pair as a whole (the upper roots are matched; the conjugates go with them),
    so the reduced roots still come in conjugate pairs. Among several
    candidates the closest pairs are taken first. Cancellation does not change
    H(s), but a cancelled pole in the right half plane or on the jω axis is a
    mode the reduced function no longer shows.
    """
    z = np.asarray(zeros, dtype=complex).ravel()
    p = np.asarray(poles, dtype=complex).ravel()
    if not (0.0 <= rel_tol < 1.0) or not math.isfinite(rel_tol):
        raise AnalysisError(f"rel_tol must be in [0, 1) (got {rel_tol!r})")
    zh = [_half(complex(r), real_tol) for r in z]
    ph = [_half(complex(r), real_tol) for r in p]
    candidates: list[tuple[float, int, int]] = []
    for i, zi in enumerate(z):
        if zh[i] < 0:
            continue
        for j, pj in enumerate(p):
            if ph[j] != zh[i]:
                continue
            scale = max(abs(zi), abs(pj))
            d = abs(zi - pj)
            if d <= rel_tol * scale:
                candidates.append((d / scale if scale else 0.0, i, j))
    candidates.sort()
    used_z: set[int] = set()
    used_p: set[int] = set()
    pairs: list[tuple[complex, complex]] = []
    for _d, i, j in candidates:
        if i in used_z or j in used_p:
            continue
        if zh[i] == 0:
            used_z.add(i)
            used_p.add(j)
            pairs.append((complex(z[i]), complex(p[j])))
            continue
        zi, pj = complex(z[i]), complex(p[j])
        iz = _mate(z, used_z | {i}, zi.conjugate(), -1, real_tol)
        jp = _mate(p, used_p | {j}, pj.conjugate(), -1, real_tol)
        if iz is None or jp is None:
            raise AnalysisError("complex roots do not come in conjugate pairs; coefficients must be real")
        used_z.update((i, iz))
        used_p.update((j, jp))
        pairs += [(zi, pj), (complex(z[iz]), complex(p[jp]))]
    keep_z = [k for k in range(len(z)) if k not in used_z]
    keep_p = [k for k in range(len(p)) if k not in used_p]
    return Cancellation(z[keep_z], p[keep_p], tuple(pairs))


def _take_factor(factors: list[Factor], role: str, root: complex) -> bool:
    """Remove from ``factors`` the ``role`` factor with a root nearest ``root``; False if none is near."""
    best: tuple[float, int, int] | None = None
    half = _half(root, 1e-9)
    for k, f in enumerate(factors):
        if f.role != role:
            continue
        rs = f.roots()
        m = int(np.argmin(np.abs(rs - root)))
        if _half(complex(rs[m]), 1e-9) != half:
            continue  # a real root never takes one root of a complex pair, nor the reverse
        d = abs(rs[m] - root) / max(abs(root), abs(rs[m]))
        if best is None or d < best[0]:
            best = (d, k, m)
    if best is None or best[0] > 1e-6:
        return False
    d, k, m = best
    f = factors.pop(k)
    if f.order == 2:
        rest = complex(f.roots()[1 - m])
        if rest.imag == 0 or abs(rest.imag) <= 1e-9 * abs(rest):
            # Q <= 0.5: the other real root stays as a first-order factor.
            factors.insert(k, Factor(role, 1, abs(rest.real), rhp=rest.real > 0))
        # A complex pair leaves together: its conjugate is the next cancelled root.
    return True


def drop_cancelled(fn: FactoredNumeric, cancellation: Cancellation) -> FactoredNumeric:
    """``fn`` without the factors of the cancelled pairs (same H(s) up to the tolerance).

    Parameters
    ----------
    fn : FactoredNumeric
        The full factored form whose roots were passed to :func:`cancel_roots`.
    cancellation : Cancellation
        Its result.

    Returns
    -------
    FactoredNumeric
        The reduced form; the gain and the formulas of the remaining factors
        are kept. Roots at the origin that cancel simply leave the origin order
        unchanged (it is already the difference).

    Raises
    ------
    AnalysisError
        A cancelled root that belongs to no factor of ``fn``.
    """
    if not cancellation.pairs:
        return fn
    factors = list(fn.factors)
    for z, p in cancellation.pairs:
        if z == 0 and p == 0:
            continue
        for role, r in (("zero", z), ("pole", p)):
            if r.imag < 0 and abs(r.imag) > 1e-9 * abs(r):
                continue  # the lower root of a pair left with its upper root
            if not _take_factor(factors, role, r):
                raise AnalysisError(f"cancelled {role} {r!r} rad/s matches no factor of the transfer function")
    return FactoredNumeric(fn.gain, fn.origin_order, tuple(factors), fn.gain_formula)


def polynomial_roots(c: Sequence[float]) -> np.ndarray:
    """Roots (rad/s) of a polynomial with non-zero leading and constant terms.

    Parameters
    ----------
    c : sequence of float
        Coefficients in descending powers of s (s in rad/s).

    Notes
    -----
    The variable is scaled, s = σ·x with σ = |c_n/c_0|^(1/n) (the geometric
    mean of the root magnitudes), and the coefficients normalized before
    ``numpy.roots``, so coefficients spanning many decades stay well
    conditioned. All roots are then polished together by Newton steps on the
    scaled polynomial, each step kept only where it reduces |p|; this restores
    full relative accuracy to roots far below the largest one.
    """
    n = len(c) - 1
    if n <= 0:
        return np.zeros(0, dtype=complex)
    log_sigma = (math.log(abs(c[-1])) - math.log(abs(c[0]))) / n
    powers = np.arange(n, -1, -1) * log_sigma
    arr = np.asarray(c, dtype=float)
    with np.errstate(divide="ignore"):
        logs = np.where(arr != 0.0, np.log(np.abs(arr), where=arr != 0.0, out=np.zeros(n + 1)) + powers, -np.inf)
    coeffs = np.sign(arr) * np.exp(logs - logs.max())
    x = np.roots(coeffs).astype(complex)
    deriv = np.polyder(coeffs)
    px = np.polyval(coeffs, x)
    for _ in range(6):
        dpx = np.polyval(deriv, x)
        ok = dpx != 0
        step = np.where(ok, px / np.where(ok, dpx, 1.0), 0.0)
        x_new = x - step
        p_new = np.polyval(coeffs, x_new)
        better = np.abs(p_new) < np.abs(px)
        if not better.any():
            break
        x = np.where(better, x_new, x)
        px = np.where(better, p_new, px)
        if np.all(np.abs(step) <= 1e-15 * np.abs(x)):
            break
    return x * math.exp(log_sigma)


def factored_from_tf(num: Sequence[float], den: Sequence[float]) -> FactoredNumeric:
    """Normalized factored form of num/den (descending powers of s, rad/s).

    Leading zero coefficients are ignored; trailing zeros are roots at the
    origin. K is the ratio of the lowest non-zero coefficients.

    Raises
    ------
    AnalysisError
        An all-zero polynomial, or roots spread so widely that a non-zero root
        cannot be told from one at the origin.
    """
    parts = []
    for coeffs in (num, den):
        cs = [float(x) for x in coeffs]
        while cs and cs[0] == 0.0:
            cs.pop(0)
        if not cs:
            raise AnalysisError("a transfer-function polynomial is identically zero")
        n_origin = 0
        while cs[-1] == 0.0:
            cs.pop()
            n_origin += 1
        parts.append((cs, n_origin, polynomial_roots(cs)))
    (cn, zn, zr), (cd, zd, pr) = parts
    gain = cn[-1] / cd[-1]
    fn = factors_from_roots(zr, pr, gain)
    if fn.origin_order != 0 or sum(f.order for f in fn.factors) != len(zr) + len(pr):
        raise AnalysisError(
            f"polynomial roots span too many decades to separate from the origin (num={list(num)!r}, den={list(den)!r})"
        )
    return FactoredNumeric(gain, zn - zd, fn.factors)
