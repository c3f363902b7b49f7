"""``'%.10g' % v`` for whole float columns, with array operations instead of one Python
format call per value (the back-fill writes six such columns per row).

The text is byte for byte that of Python's ``%.10g``: each value is scaled to ten
significant digits with exact powers of ten (at most two roundings); a value whose
rounding that float arithmetic cannot decide with a wide margin (the part below the
tenth digit within 1e-4 of one half), or that is not finite or outside 1e-35…1e54, is
formatted by Python itself. The digits are then laid out with column slices, once per
(decimal exponent, sign) present, and cut after the last significant digit.
"""

from __future__ import annotations

import functools

import numpy as np
from numpy.typing import NDArray

__all__ = ["WIDTH", "format_g10", "format_g10_str"]

#: Bytes per formatted value (the longest %.10g text is 17: "-1.234567891e-100").
WIDTH = 24
_P10 = np.array([float(10**k) for k in range(23)])  # exact powers of ten
_TIE_MARGIN = 1e-4  # the scaled value's error is below ~5e-6 (two roundings, < 1e10)
_ZERO = ord("0")
_EMIN, _EMAX = -36, 55  # decimal exponents the fast path can produce


@functools.cache
def _digits5() -> NDArray[np.bytes_]:
    """Item i: the five ASCII digits of i (zero-padded) as one S5 item, for i < 100 000."""
    i = np.arange(100_000)
    d = ((i[:, None] // np.array([10_000, 1000, 100, 10, 1])) % 10 + _ZERO).astype(np.uint8)
    return np.ascontiguousarray(d).view("S5").ravel()


def _scale(a: NDArray, s: NDArray) -> NDArray:
    """a·10^s for |s| ≤ 44 with exact powers of ten (one or two roundings)."""
    s1 = np.clip(s, -22, 22)
    y = np.where(s1 >= 0, a * _P10[np.maximum(s1, 0)], a / _P10[np.maximum(-s1, 0)])
    s2 = s - s1
    if s2.any():
        y = np.where(s2 > 0, y * _P10[np.maximum(s2, 0)], np.where(s2 < 0, y / _P10[np.maximum(-s2, 0)], y))
    return y


def _layout(d: NDArray[np.uint8], k: NDArray[np.int64], exp: int, negative: bool) -> tuple[NDArray, NDArray]:
    """'%.10g' texts of rows sharing one decimal exponent and sign: ``d`` their ten
    mantissa digits (ASCII), ``k`` the significant digits left after stripping zeros."""
    n = d.shape[0]
    out = np.zeros((n, WIDTH), dtype=np.uint8)
    at = 0
    if negative:
        out[:, 0] = ord("-")
        at = 1
    col = np.arange(WIDTH)
    if -4 <= exp < 10:
        if exp >= 0:  # integer digits (zeros past d(k−1) are digits too), then the rest
            out[:, at: at + exp + 1] = d[:, : exp + 1]
            out[:, at + exp + 1] = ord(".")
            out[:, at + exp + 2: at + 11] = d[:, exp + 1:]
            length = at + np.where(k > exp + 1, k + 1, exp + 1)
        else:
            lead = -exp - 1
            out[:, at] = _ZERO
            out[:, at + 1] = ord(".")
            out[:, at + 2: at + 2 + lead] = _ZERO
            out[:, at + 2 + lead: at + 12 + lead] = d
            length = at + 2 + lead + k
        out *= col < length[:, None]
        return out, length
    out[:, at] = d[:, 0]
    out[:, at + 1] = ord(".")
    out[:, at + 2: at + 11] = d[:, 1:]
    mant = at + np.where(k > 1, k + 1, 1)
    out *= col < mant[:, None]
    suffix = np.frombuffer(f"e{exp:+03d}".encode("ascii"), dtype=np.uint8)
    rows = np.arange(n)
    for j, c in enumerate(suffix):
        out[rows, mant + j] = c
    return out, mant + suffix.size


def format_g10(x: NDArray[np.float64]) -> tuple[NDArray[np.uint8], NDArray[np.int64]]:
    """The ``%.10g`` text of each value as an (n, WIDTH) byte matrix (left-aligned,
    NUL-padded) and the text lengths."""
    x = np.ascontiguousarray(x, dtype=np.float64).ravel()
    n = x.size
    chars = np.zeros((n, WIDTH), dtype=np.uint8)
    length = np.zeros(n, dtype=np.int64)
    if n == 0:
        return chars, length
    neg = np.signbit(x)
    a = np.abs(x)
    with np.errstate(all="ignore"):
        zero = a == 0.0
        fast = np.isfinite(a) & (a > 1e-35) & (a < 1e54)
        e0 = np.floor(np.log10(np.where(fast, a, 1.0))).astype(np.int64)
        y = _scale(np.where(fast, a, 1.0), 9 - e0)
        # floor(log10) may be one off next to a power of ten: correct it once.
        off = fast & ((y < 1e9) | (y >= 1e10))
        if off.any():
            e0[off] += np.where(y[off] >= 1e10, 1, -1)
            y[off] = _scale(a[off], 9 - e0[off])
        fast &= (y >= 1e9) & (y < 1e10)
        y = np.where(fast, y, 1e9)
        r = np.floor(y)
        frac = y - r
        fast &= np.abs(frac - 0.5) > _TIE_MARGIN
    m = r.astype(np.int64) + (frac > 0.5)
    carry = m == 10**10
    m[carry] = 10**9
    exp = e0 + carry
    exp[~fast] = 0
    table5 = _digits5()
    digits = np.empty((n, 2), dtype="S5")
    digits[:, 0] = table5[m // 100_000]
    digits[:, 1] = table5[m % 100_000]
    digits = digits.view(np.uint8).reshape(n, 10)
    k = 10 - np.argmax(digits[:, ::-1] != _ZERO, axis=1)  # digits left after stripping zeros
    # One layout per (exponent, sign) present: a column has only a few.
    code = (exp - _EMIN) * 2 + neg
    code[~fast] = -1
    present = np.flatnonzero(np.bincount(code[fast], minlength=1)) if fast.any() else []
    for c in present:
        if len(present) == 1 and fast.all():  # the usual column: one layout for every row
            chars, length = _layout(digits, k, int(c) // 2 + _EMIN, bool(c % 2))
            break
        rows = np.flatnonzero(code == c)
        out, ln = _layout(digits[rows], k[rows], int(c) // 2 + _EMIN, bool(c % 2))
        chars[rows] = out
        length[rows] = ln
    # Zero is "0" or "-0"; all else the fast path left is formatted by Python itself.
    zi = np.flatnonzero(zero)
    if zi.size:
        chars[zi, 0] = np.where(neg[zi], ord("-"), _ZERO)
        chars[zi, 1] = np.where(neg[zi], _ZERO, 0)
        length[zi] = 1 + neg[zi]
    other = np.flatnonzero(~fast & ~zero)
    if other.size:
        texts = ["%.10g" % v for v in x[other].tolist()]  # noqa: UP031 - the contract itself
        chars[other] = np.array(texts, dtype=f"S{WIDTH}").view(np.uint8).reshape(other.size, WIDTH)
        length[other] = [len(t) for t in texts]
    return chars, length


def format_g10_str(x: NDArray[np.float64]) -> list[str]:
    """``['%.10g' % v for v in x]``, computed column-wise."""
    chars, _ = format_g10(x)
    return chars.view(f"S{WIDTH}").ravel().astype(f"U{WIDTH}").tolist()
