"""The sign of a platform corner's cornering toe change as a function of one link's bush
stiffness, decided from a root found once instead of a compliance solve per sample.

Pure numpy/scipy (no Django); stiffness in N/mm, toe change in deg.
"""
from __future__ import annotations

import math

import numpy as np


class SignByStiffness:
    """``function(k) < 0`` for stiffness arrays ``k`` (N/mm, any shape), computed once per platform
    corner and link instead of once per sample.

    The cornering toe change as a function of one link's stiffness is smooth, and monotonic over
    the stiffnesses a bush has in service (the link's deflection is ``f/k`` and the wheel's small
    rotation is linear in it, DESIGN.md §4); at stiffnesses near zero the rotations grow large and
    it is not. That is checked, not assumed: the exact function is evaluated on ``CHECK_POINTS``
    log-spaced stiffnesses up to ``K_HIGH``, and the widest range ``[k_mono, K_HIGH]`` ending
    there on which it is strictly monotonic is kept. Inside it, the single zero ``k*`` (if any) is
    found with ``scipy.optimize.brentq`` and ``k`` is below zero by which side of ``k*`` it lies
    on. Values outside that range, or within ``ROOT_GUARD`` (relative) of ``k*``, are evaluated
    exactly, so the answer is always the function's own sign.
    """

    K_LOW, K_HIGH = 1.0, 1.0e6  # N/mm: the range checked
    CHECK_POINTS = 4097
    ROOT_GUARD = 1e-9

    def __init__(self, function):
        from scipy.optimize import brentq

        self.function = function
        ks = np.geomspace(self.K_LOW, self.K_HIGH, self.CHECK_POINTS)
        v = np.asarray(function(ks), dtype=float)
        d = np.sign(np.diff(v))
        self.root: float | None = None
        self.k_mono = math.inf  # nothing is decided by the root unless the check passes
        self.negative_above = False
        self.constant_sign = False  # inside [k_mono, K_HIGH] with no zero: all below zero?
        if np.all(np.isfinite(v)) and d[-1] != 0:
            breaks = np.nonzero(d != d[-1])[0]
            first = int(breaks[-1]) + 1 if breaks.size else 0
            self.k_mono = float(ks[first])
            vv, kk = v[first:], ks[first:]
            self.negative_above = bool(d[-1] < 0)
            neg = vv < 0
            if neg.all() or not neg.any():
                self.constant_sign = bool(neg.all())
            else:
                j = int(np.nonzero(neg[1:] != neg[:-1])[0][0])
                self.root = float(brentq(lambda k: float(function(np.array([k]))[0]),
                                         kk[j], kk[j + 1], xtol=1e-12, rtol=1e-14))

    #: Relative margin by which :meth:`never_below_zero` keeps away from the range's ends and
    #: the zero: far above the rounding of ``np.exp`` and of the bounds (a few 1e-16) and above
    #: ``ROOT_GUARD``.
    SAFE = 1e-6

    def never_below_zero(self, k_min: np.ndarray, k_max: np.ndarray) -> np.ndarray:
        """Whether no stiffness in ``[k_min, k_max]`` (N/mm, arrays of one shape) can be below
        zero: the interval lies inside the checked monotonic range, on the side of the zero (or
        in a range without one) where the function is not below zero, by :data:`SAFE`."""
        k_min, k_max = np.asarray(k_min, dtype=float), np.asarray(k_max, dtype=float)
        inside = (k_min >= self.k_mono * (1.0 + self.SAFE)) & (k_max <= self.K_HIGH * (1.0 - self.SAFE))
        if self.root is None:
            return inside & (not self.constant_sign)
        if self.negative_above:  # below zero above the root
            return inside & (k_max <= self.root * (1.0 - self.SAFE))
        return inside & (k_min >= self.root * (1.0 + self.SAFE))

    #: Margin (natural log of N/mm) by which a sample's exponent must keep clear of the zero's
    #: guard zone for :meth:`band_fails` to decide it without computing it: far above the
    #: rounding of ``np.exp``/``math.log`` and of the exponents (≈ 1e-15 for the stiffnesses of
    #: bushes).
    LOG_MARGIN = 1e-12

    def band_fails(self, mid: np.ndarray, half: np.ndarray, u: np.ndarray
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Whether any, the centre and every sample of stiffness bands is below zero: what
        ``self(np.exp(mid[..., None] + u * half[..., None]))`` gives, reduced over its last axis
        as ``any``, ``[..., len(u) // 2]`` and ``all``.

        ``mid``, ``half``: log stiffness (ln N/mm) centre and half-width, arrays of one shape;
        ``u``: the sample positions, ascending from -1 to 1 with 0 in the middle (as
        ``np.linspace(-1, 1, odd)``). Three samples decide a band — its ends ``exp(mid ∓ half)``
        and centre ``exp(mid)``, the very values the full evaluation computes there — where every
        sample lies inside the range decided by the zero (:meth:`__call__`'s rule) and none lies
        within its guard zone, where the rule is a threshold: the samples rise with ``u``, so
        "any" and "every" are the ends' answers. That is checked, not assumed (in ``u``, with
        :data:`LOG_MARGIN`); the other bands are evaluated sample by sample, exactly as before.
        """
        mid, half = np.asarray(mid, dtype=float), np.asarray(half, dtype=float)
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            k_lo, k_c, k_hi = np.exp(mid - half), np.exp(mid), np.exp(mid + half)
            fast = (half >= 0) & np.isfinite(k_lo) & np.isfinite(k_hi) \
                & (k_lo >= self.k_mono * (1.0 + self.SAFE)) \
                & (k_hi <= self.K_HIGH * (1.0 - self.SAFE))
            if self.root is None:
                f_lo = f_c = f_hi = np.full(mid.shape, self.constant_sign)
            else:
                g1 = math.log(self.root * (1.0 - self.ROOT_GUARD)) - self.LOG_MARGIN
                g2 = math.log(self.root * (1.0 + self.ROOT_GUARD)) + self.LOG_MARGIN
                # sample i is at u_i = -1 + 2i/(s-1); a sample's exponent in [g1, g2] means
                # u_i in [(g1 - mid)/half, (g2 - mid)/half] (widened: conservative)
                steps = (u.size - 1) / 2.0
                a = ((g1 - mid) / half + 1.0) * steps - 1e-6
                b = ((g2 - mid) / half + 1.0) * steps + 1e-6
                i_lo = np.maximum(np.ceil(a), 0.0)
                i_hi = np.minimum(np.floor(b), u.size - 1.0)
                guard = np.where(half > 0, i_lo <= i_hi, (mid >= g1) & (mid <= g2))
                fast &= ~guard
                if self.negative_above:
                    f_lo, f_c, f_hi = k_lo > self.root, k_c > self.root, k_hi > self.root
                else:
                    f_lo, f_c, f_hi = k_lo < self.root, k_c < self.root, k_hi < self.root
        # the rule is monotonic in k: "any" is the end most likely to fail, "every" the other
        if self.root is not None and not self.negative_above:
            f_any, f_all = f_lo, f_hi
        else:
            f_any, f_all = f_hi, f_lo
        f_any, f_c, f_all = (np.where(fast, x, False) for x in (f_any, f_c, f_all))
        slow = ~fast
        if slow.any():
            with np.errstate(over="ignore", invalid="ignore"):  # non-finite bands, as before
                k = np.exp(mid[slow][:, None] + u * half[slow][:, None])
            f = self(k)
            f_any[slow], f_c[slow], f_all[slow] = f.any(axis=1), f[:, u.size // 2], f.all(axis=1)
        return f_any, f_c, f_all

    def __call__(self, k: np.ndarray) -> np.ndarray:
        k = np.asarray(k, dtype=float)
        inside = (k >= self.k_mono) & (k <= self.K_HIGH)
        if self.root is None:
            out = np.full(k.shape, self.constant_sign)
            exact = ~inside
        else:
            out = (k > self.root) if self.negative_above else (k < self.root)
            exact = ~inside | (np.abs(k / self.root - 1.0) < self.ROOT_GUARD)
        if exact.any():
            out[exact] = np.asarray(self.function(k[exact]), dtype=float) < 0.0
        return out
