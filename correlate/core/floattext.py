"""Float columns as the text ``"%.10g" % v`` gives, in bulk, for the CSV writer in `table_text`.

Stage: core (output). Input: float64 arrays, rounded or to be rounded; output: pyarrow string
arrays. A value is formatted in bulk only where it is proven to be the double nearest to a decimal
D of at most 10 significant digits: then ``"%.10g"`` prints D itself, and so does any correct
shortest-decimal printer. Every other finite value gets the ``%`` call, one by one.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

G_FORMAT = "%.10g"
G_DIGITS = 10                                               # the precision of G_FORMAT
_POW10_INT = 10 ** np.arange(19, dtype=np.int64)            # exact powers of ten in int64
_POW10_FLOAT = 10.0 ** np.arange(23)                        # 1e0 … 1e22 are exact in float64
_EXP_SPAN = 400                                             # |decimal exponent| of any float64
_EXP_TABLE = pa.array([f"e{x:+03d}" for x in range(-_EXP_SPAN, _EXP_SPAN + 1)] + [""],
                      type=pa.large_string())
_SIGNS = pa.array(["", "-"], type=pa.large_string())
_EMPTY = pa.scalar("", pa.large_string())


def sig_round(v: float, digits: int) -> float:
    """Round one float to ``digits`` significant digits through its decimal text (reference)."""
    if v is None or not math.isfinite(v) or v == 0:
        return v
    return float(f"{v:.{digits}g}")


# ---------------------------------------------------------------- exact decimals
def grid_decimal(v: np.ndarray, decimals: int) -> tuple[np.ndarray, np.ndarray]:
    """Return c = |k| and ok where v is the double nearest to the decimal k * 10**-decimals.

    Parameters
    ----------
    v : ndarray of float64 [n]
        Values already rounded to ``decimals`` places (``numpy.round``).
    decimals : int
        Decimal places, 0 … 22.

    Returns
    -------
    c : ndarray of int64 [n]
        |k|, fewer than 11 digits where ok, else 0.
    ok : ndarray of bool [n]
        True where ``k / 10**decimals == v`` with k = rint(v * 10**decimals) and |k| < 1e10.

    Notes
    -----
    10**decimals and k are exact in float64 and IEEE 754 division is correctly rounded, so where
    the quotient equals v, v is the double nearest to k * 10**-decimals (IEEE 754-2019, 4.3).
    """
    p = _POW10_FLOAT[decimals]
    with np.errstate(all="ignore"):
        k = np.rint(v * p)
        ok = np.isfinite(v) & (np.abs(k) < 1e10) & (k / p == v)
    return np.where(ok, np.abs(k), 0.0).astype(np.int64), ok


def _scale(ax: np.ndarray, s: np.ndarray) -> np.ndarray:
    p = _POW10_FLOAT[np.clip(np.abs(s), 0, 22)]
    with np.errstate(all="ignore"):
        return np.where(s >= 0, ax * p, ax / p)


def sig_decimal(x: np.ndarray, digits: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return c, e, ok with c * 10**e the ``digits``-significant rounding of |x| where ok.

    Parameters
    ----------
    x : ndarray of float64 [n]
        Values.
    digits : int
        Significant digits, 1 … 10.

    Returns
    -------
    c, e : ndarray of int64 [n]
        Significand (``digits`` or ``digits`` + 1 digits) and decimal exponent; 0, 0 for zeros.
    ok : ndarray of bool [n]
        True where c * 10**e is proven to be what ``f"{x:.{digits}g}"`` prints, and for zeros.

    Notes
    -----
    m = |x| * 10**s with |s| <= 22 is one correctly rounded operation on exact operands, so
    |m - exact| <= ulp(m) / 2 < 6e-11 for m <= 1e6; rint(m) is the correctly rounded significand
    unless m lies within 1e-9 of a half-integer (ties and near-ties go to ``sig_round``). Python
    formats floats correctly rounded, half to even (Python docs, "Floating-Point Arithmetic").
    """
    ax = np.abs(x)
    nz = np.isfinite(ax) & (ax > 0)
    lo, hi = 10.0 ** (digits - 1), 10.0 ** digits
    with np.errstate(all="ignore"):
        x0 = np.floor(np.log10(np.where(nz, ax, 1.0))).astype(np.int64)
        m = _scale(ax, digits - 1 - x0)
        x0 += (m >= hi).astype(np.int64) - (m < lo)
        s = digits - 1 - x0
        m = _scale(ax, s)
        ok = nz & (np.abs(s) <= 22) & (m >= lo) & (m <= hi)
        ok &= np.abs(m - np.floor(m) - 0.5) > 1e-9
        c = np.where(ok, np.rint(m), 0.0).astype(np.int64)
    ok |= ax == 0
    return c, np.where(ok & nz, -s, 0), ok


def decimal_value(x: np.ndarray, c: np.ndarray, e: np.ndarray, ok: np.ndarray) -> np.ndarray:
    """Return the double nearest to sign(x) * c * 10**e where ok (|e| <= 22), else x itself."""
    p = _POW10_FLOAT[np.where(ok, np.abs(e), 0)]
    v = np.where(e >= 0, c * p, c / p)     # one correctly rounded operation on exact operands
    return np.where(ok & (x != 0), np.where(np.signbit(x), -v, v), x)


def sig_values(x: np.ndarray, digits: int) -> np.ndarray:
    """Return ``sig_round`` of every value of a float64 array, vectorised where proven."""
    c, e, ok = sig_decimal(x, digits)
    out = decimal_value(x, c, e, ok)
    for i in np.flatnonzero(~ok & np.isfinite(x)):
        out[i] = sig_round(float(x[i]), digits)
    return out


# ---------------------------------------------------------------- text
def format_g10(neg: np.ndarray, c: np.ndarray, e: np.ndarray) -> pa.Array:
    """Format (-1)**neg * c * 10**e (0 <= c < 10**10, integers) as ``"%.10g"`` prints it.

    Parameters
    ----------
    neg : ndarray of bool [n]
        Sign bit of each value (so -0.0 prints as "-0").
    c, e : ndarray of int64 [n]
        Decimal significand (at most 10 digits) and exponent.

    Returns
    -------
    pyarrow.LargeStringArray [n]

    Notes
    -----
    A decimal D of at most P = 10 significant digits is its own rounding to P digits, so
    ``"%.Pg"`` prints it with X = floor(log10|D|): positional with P - 1 - X decimals when
    -4 <= X < P, else d.ddd e±XX with at least two exponent digits; then trailing zeros and a
    bare point go (ISO/IEC 9899, 7.21.6.1, conversion ``g``; Python docs, "printf-style String
    Formatting", which defers to it).
    """
    c = c.copy()
    e = np.array(e, dtype=np.int64)
    zero = c == 0
    for _ in range(G_DIGITS + 1):                       # trailing zeros into the exponent
        t = (c % 10 == 0) & ~zero
        if not t.any():
            break
        c[t] //= 10
        e[t] += 1
    e[zero] = 0
    n = np.maximum(np.searchsorted(_POW10_INT, c, side="right"), 1)   # digits of c
    x = e + n - 1
    fixed = (x >= -4) & (x < G_DIGITS)
    w = np.where(fixed, np.maximum(-e, 0), n - 1)       # digits after the point
    scale = _POW10_INT[w]
    up = _POW10_INT[np.where(fixed, np.clip(e, 0, 9), 0)]
    whole = np.where(fixed & (e > 0), c * up, c // scale)
    parts = [pc.cast(pa.array(whole), pa.large_string())]
    if neg.any():
        parts.insert(0, _SIGNS.take(pa.array(neg.astype(np.int8))))
    if (w > 0).any():
        frac = pc.cast(pa.array(c % scale + scale), pa.large_string())
        frac = pc.binary_replace_slice(frac, start=0, stop=1, replacement=".")
        parts.append(pc.if_else(pa.array(w > 0), frac, _EMPTY))
    if not fixed.all():
        idx = np.where(fixed, len(_EXP_TABLE) - 1, np.clip(x, -_EXP_SPAN, _EXP_SPAN) + _EXP_SPAN)
        parts.append(_EXP_TABLE.take(pa.array(idx)))
    return parts[0] if len(parts) == 1 else pc.binary_join_element_wise(*parts, _EMPTY)


def _patched(cells: pa.Array, mask: np.ndarray, make: Callable[[np.ndarray], pa.Array]
             ) -> pa.Array:
    """Replace the cells under mask by make(indices), with one concatenation and one take."""
    idx = np.flatnonzero(mask)
    if len(idx) == 0:
        return cells
    order = np.arange(len(cells))
    order[idx] = len(cells) + np.arange(len(idx))
    return pa.concat_arrays([cells, make(idx)]).take(pa.array(order))


def _g10_cells(shown: np.ndarray, c: np.ndarray, e: np.ndarray, ok: np.ndarray,
               raw: np.ndarray, one_by_one: Callable[[float], str]) -> pa.Array:
    """Format proven values by ``format_g10``, NaN and infinities by table, the rest one by one.

    ``one_by_one(raw[i])`` gives the text of an unproven finite value.
    """
    cells = format_g10(np.signbit(shown), c, e)

    def special(idx: np.ndarray) -> pa.Array:
        v = shown[idx]
        codes = np.where(np.isnan(v), 0, np.where(v > 0, 1, 2))
        slow = np.flatnonzero(np.isfinite(v))
        codes[slow] = 3 + np.arange(len(slow))
        table = pa.array(["", G_FORMAT % math.inf, G_FORMAT % -math.inf,
                          *(one_by_one(r) for r in raw[idx[slow]])], type=pa.large_string())
        return table.take(pa.array(codes))
    return _patched(cells, ~ok, special)


def _shortest_cells(shown: np.ndarray, c: np.ndarray, e: np.ndarray, ok: np.ndarray,
                    positional: np.ndarray, raw: np.ndarray,
                    one_by_one: Callable[[float], str]) -> pa.Array:
    """Print proven positional values by pyarrow's shortest-decimal cast; NaN become nulls."""
    if not _ARROW_PRINTS_LIKE_G:
        return _g10_cells(shown, c, e, ok, raw, one_by_one)
    cells = pc.cast(pa.array(shown, from_pandas=True), pa.large_string())     # NaN -> null
    return _patched(cells, ~positional & ~np.isnan(shown), lambda i: _g10_cells(
        shown[i], c[i], e[i], ok[i], raw[i], one_by_one))


def grid_cells(v: np.ndarray, decimals: int) -> pa.Array:
    """Return ``"%.10g" % x`` for every x of a float64 array rounded to ``decimals`` places.

    Parameters
    ----------
    v : ndarray of float64 [n]
        Rounded values (``numpy.round(values, decimals)``).
    decimals : int
        Decimal places of the rounding, 0 … 22.

    Returns
    -------
    pyarrow.LargeStringArray [n]
        Null (or "") for NaN: an empty CSV cell.

    Notes
    -----
    Where ``grid_decimal`` proves v nearest to D = ±c * 10**-decimals with c < 10**10,
    ``"%.10g"`` prints D (see ``format_g10``). The shortest decimal that reads back as v is D
    too: another decimal of at most 10 digits lies at least 1e-10 |D| from D, much more than
    the half ulp (1.1e-16 |D|) within which it would have to lie. pyarrow's float-to-string
    cast prints that shortest decimal, positional for -4 <= X < 10 as "%.10g" does there
    (checked on import by ``_arrow_prints_like_g``); other values go through ``format_g10``.
    """
    c, ok = grid_decimal(v, decimals)
    e = np.full(v.shape, -decimals, dtype=np.int64)
    # D < 10**(10 - decimals) always; D >= 1e-4 unless c < 10**(decimals - 4)
    positional = ok & ((c == 0) | (c >= _POW10_INT[max(decimals - 4, 0)]))
    return _shortest_cells(v, c, e, ok, positional, v, lambda r: G_FORMAT % r)


def sig_cells(x: np.ndarray, digits: int) -> pa.Array:
    """Return ``"%.10g" % sig_round(v, digits)`` for every v of a float64 array.

    Parameters
    ----------
    x : ndarray of float64 [n]
        Values before rounding.
    digits : int
        Significant digits of the rounding, 1 … 10.

    Returns
    -------
    pyarrow.LargeStringArray [n]
        Null (or "") for NaN: an empty CSV cell.

    Notes
    -----
    The rounded value is the double nearest to D = c * 10**e of ``digits`` digits (see
    ``sig_decimal``, ``decimal_value``); it prints as D, as in ``grid_cells``.
    """
    c, e, ok = sig_decimal(x, digits)
    xexp = e + (digits - 1) + (c >= _POW10_INT[digits])          # decimal exponent of D
    positional = ok & ((c == 0) | ((xexp >= -4) & (xexp < G_DIGITS)))

    def one_by_one(r: float) -> str:
        return G_FORMAT % sig_round(float(r), digits)
    return _shortest_cells(decimal_value(x, c, e, ok), c, e, ok, positional, x, one_by_one)


def _arrow_prints_like_g() -> bool:
    """Check pyarrow's float-to-string cast against "%.10g" on positional-notation cases."""
    probe = [0.0, -0.0, 12.0, 100.0, 0.001, 0.0001, 0.00012345, -1042.526, 1.5, 999999.6,
             123456789.0, 1234567891.0, 9999999999.0, -0.0005, 0.1, 7e-4, 1e9]
    try:
        got = pc.cast(pa.array(probe), pa.large_string()).to_pylist()
    except pa.ArrowException:
        return False
    return got == [G_FORMAT % v for v in probe]


_ARROW_PRINTS_LIKE_G = _arrow_prints_like_g()
