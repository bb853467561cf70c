"""Optimal superposition of many frames at once, for the PCA's frame pass.

Rotations: the quaternion method. For centred mobile coordinates a_i, centred reference b_i and weights
w_i, the correlation matrix S = sum_i w_i a_i^T b_i (3 x 3) defines Horn's symmetric 4 x 4 matrix N
(Horn, J. Opt. Soc. Am. A 4, 629 (1987)); the unit eigenvector of its largest eigenvalue lambda_max is the
quaternion of the best rotation, and sum_i w_i |a_i R - b_i|^2 = G_a + G_b - 2 lambda_max. lambda_max is
the largest root of the characteristic polynomial P(l) = l^4 + c2 l^2 + c1 l + c0 with c2 = -2 ||S||_F^2,
c1 = -8 det S, c0 = det N, found by Newton's method from an upper bound (Theobald, Acta Cryst. A 61, 478
(2005), "QCP"; here the bound sqrt(3) ||S||_F >= s1 + s2 + s3 >= lambda_max, from which Newton descends
monotonically because every root of P is real). The eigenvector is then taken by two steps of inverse
iteration with a shift just above lambda_max (Golub and Van Loan, Matrix Computations, 4th ed., 2013,
section 8.2.2), which is well defined even when the top eigenvalue is degenerate (any vector of that
eigenspace is an optimal rotation). Everything on the 3 x 3 and 4 x 4 matrices is float64 and vectorised
over the frames of a chunk (no loop over frames in Python): about half the time of a batched 3 x 3 SVD
(Kabsch, Acta Cryst. A 32, 922 (1976)) on this machine, and the same rotations to ~1e-14.

Data: :class:`FrameFitter` forms, for a chunk x of shape (m, g, 3), the fitted displacements
y = s * ((x - c_x) R - (ref - c_ref)) (s a per-atom scale, e.g. sqrt(mass)) in the working precision
(float32 by default), every step a contiguous array operation or a BLAS product:

* the weighted centre of every frame, c_x = x W_c, one (m x 3g) (3g x 3) product;
* the centred frame, transposed to a component-major (m, 3, g) layout in the same pass (x - c_x), then
  scaled by s (in the rotation instead when s is the same for every atom);
* S for every frame, one (m x 3g) (3g x 9) product on the centred frame (centring first keeps the
  float32 rounding relative to the size of the group, not to the distance from the box origin);
* the rotation of every frame, R^T (x - c_x)^T (batched matmul), minus the constant s (ref - c_ref).

The output is component-major (``order`` maps its columns to atom-major coordinates): in the atom-major
layout the per-frame 3-vector broadcasts run with an inner loop of length 3, measured 2-3x slower.
Measured here (one core, 1000 atoms, 1000 frames): 14 ms against 47 ms for the float64 SVD route.

Rounding: float32 data with float64 3 x 3 algebra give rotations within ~2e-7 of the float64 route and
displacements within ~2e-7 |x| s of it (the centre is rounded once in float32: a rigid translation of
~1e-7 |x| per frame: variance of order (1e-7 |x| s)^2 along the rigid translations, ~1e-10 of a typical
mode's variance); the tests check
both against the float64 route and the rotations against scipy's ``Rotation.align_vectors``.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from phasewake.core.errors import AnalysisError

# Frames are fitted in sub-blocks of about this many bytes per array, so that the arrays a sub-block
# touches stay in the cache: in the PCA pass (one core, 1000 atoms, 30000 frames) 2 MB took 1.13-1.24 s
# against 1.16-1.41 s for 16 MB; below 1 MB the Python overhead per sub-block wins (noisy shared machine).
BLOCK_BYTES = 1 << 21
_START = np.array([1.0, 0.6, 0.35, 0.2])  # fixed inverse-iteration start (not special for any rotation)


def horn_matrix(s: np.ndarray) -> np.ndarray:
    """Horn's (1987) symmetric 4 x 4 matrices N from correlation matrices S.

    s : (n, 3, 3), S[p, q] = sum_i w_i a_ip b_iq (a mobile, b reference, both centred). Returns (n, 4, 4).
    """
    sxx, sxy, sxz = s[:, 0, 0], s[:, 0, 1], s[:, 0, 2]
    syx, syy, syz = s[:, 1, 0], s[:, 1, 1], s[:, 1, 2]
    szx, szy, szz = s[:, 2, 0], s[:, 2, 1], s[:, 2, 2]
    k = np.empty((s.shape[0], 4, 4))
    k[:, 0, 0] = sxx + syy + szz
    k[:, 1, 1] = sxx - syy - szz
    k[:, 2, 2] = syy - sxx - szz
    k[:, 3, 3] = szz - sxx - syy
    k[:, 0, 1] = k[:, 1, 0] = syz - szy
    k[:, 0, 2] = k[:, 2, 0] = szx - sxz
    k[:, 0, 3] = k[:, 3, 0] = sxy - syx
    k[:, 1, 2] = k[:, 2, 1] = sxy + syx
    k[:, 1, 3] = k[:, 3, 1] = szx + sxz
    k[:, 2, 3] = k[:, 3, 2] = syz + szy
    return k


def quaternion_rotations(q: np.ndarray) -> np.ndarray:
    """Rotation matrices (row-vector convention, x -> x @ R) of unit quaternions q = (q0, q1, q2, q3), (n, 4)."""
    q0, q1, q2, q3 = q[:, 0], q[:, 1], q[:, 2], q[:, 3]
    r = np.empty((q.shape[0], 3, 3))
    # the column-vector rotation M(q), stored transposed
    r[:, 0, 0] = q0 * q0 + q1 * q1 - q2 * q2 - q3 * q3
    r[:, 1, 1] = q0 * q0 - q1 * q1 + q2 * q2 - q3 * q3
    r[:, 2, 2] = q0 * q0 - q1 * q1 - q2 * q2 + q3 * q3
    r[:, 1, 0] = 2.0 * (q1 * q2 - q0 * q3)
    r[:, 0, 1] = 2.0 * (q1 * q2 + q0 * q3)
    r[:, 2, 0] = 2.0 * (q1 * q3 + q0 * q2)
    r[:, 0, 2] = 2.0 * (q1 * q3 - q0 * q2)
    r[:, 2, 1] = 2.0 * (q2 * q3 - q0 * q1)
    r[:, 1, 2] = 2.0 * (q2 * q3 + q0 * q1)
    return r


def qcp_rotations(s: np.ndarray, *, max_newton: int = 100) -> np.ndarray:
    """Best rotations from correlation matrices, by the quaternion characteristic polynomial.

    Parameters
    ----------
    s : (n, 3, 3) float64
        S[p, q] = sum_i w_i a_ip b_iq for centred mobile a and centred reference b.
    max_newton : int
        Newton steps at most (converged frames stop changing; a doubly degenerate top root converges
        linearly, about one bit per step).

    Returns
    -------
    (n, 3, 3) rotations R with a_i @ R ~ b_i (the convention of ``coordinates.kabsch``). A frame with
    S = 0 (one atom, or all atoms at the centre) gets the identity.
    """
    s = np.asarray(s, dtype=np.float64)
    n = s.shape[0]
    if n == 0:
        return np.zeros((0, 3, 3))
    k = horn_matrix(s)
    fro2 = np.einsum("nij,nij->n", s, s)
    c2 = -2.0 * fro2
    c1 = -8.0 * np.linalg.det(s)
    c0 = np.linalg.det(k)
    lam = np.sqrt(3.0 * fro2)
    tol = 1e-15 * lam
    for _ in range(max_newton):
        l2 = lam * lam
        p = (l2 + c2) * l2 + c1 * lam + c0
        dp = (4.0 * l2 + 2.0 * c2) * lam + c1
        step = p / np.where(dp > 0.0, dp, np.inf)
        lam = lam - step
        if np.all(np.abs(step) <= tol):
            break
    scale = np.sqrt(fro2)
    good = scale > 1e-300
    shift = np.where(good, lam + 1e-9 * scale, 1.0)
    a = k - shift[:, None, None] * np.eye(4)
    a[~good] = -np.eye(4)
    v = np.linalg.solve(a, np.broadcast_to(_START, (n, 4))[..., None])[..., 0]
    v /= np.linalg.norm(v, axis=1, keepdims=True)
    v = np.linalg.solve(a, v[..., None])[..., 0]
    v /= np.linalg.norm(v, axis=1, keepdims=True)
    rot = quaternion_rotations(v)
    rot[~good] = np.eye(3)
    return rot


class FrameFitter:
    """Fit chunks of frames of a g-atom group onto a reference; see the module docstring.

    Parameters
    ----------
    reference_nm : (g, 3)
    weights : (g,) fit weights (e.g. masses), non-negative with a positive sum
    scale : (g,), optional
        Per-atom factor s of the output (e.g. sqrt(mass)); default 1.
    dtype : np.float32 or np.float64
        Working precision of the per-atom arrays (the 3 x 3 algebra is always float64).
    fit : bool
        False: no rotation or centring, y = s (x - ref).

    Attributes
    ----------
    order : (3g,) int
        Column j of the output holds atom-major coordinate ``order[j]`` (atom-major: x0 y0 z0 x1 ...).
        With fitting the output is component-major (x0 x1 ... y0 y1 ... z0 ...): then every step is a
        contiguous array operation or a BLAS product (an atom-major layout needs per-frame 3-vector
        broadcasts, measured 2-3x slower). Without fitting it is atom-major (``order`` = arange).
    shift : (3g,) float64
        What to add to y to get s * (fitted positions), in the output's column order.
    """

    order: np.ndarray
    shift: np.ndarray
    sq3: np.ndarray
    ref_flat: np.ndarray
    w_centre: np.ndarray
    sq: np.ndarray
    w_corr: np.ndarray
    rc_scaled: np.ndarray
    _buf: np.ndarray

    def __init__(self, reference_nm: np.ndarray, weights: np.ndarray, *, scale: np.ndarray | None = None,
                 dtype: type = np.float32, fit: bool = True) -> None:
        ref = np.asarray(reference_nm, dtype=np.float64)
        g = ref.shape[0]
        w = np.asarray(weights, dtype=np.float64)
        sq = np.ones(g) if scale is None else np.asarray(scale, dtype=np.float64)
        self.g, self.d, self.dtype, self.fit = g, 3 * g, dtype, bool(fit)
        self.block_bytes = BLOCK_BYTES
        if not self.fit:
            self.order = np.arange(self.d)
            self.sq3 = np.repeat(sq, 3).astype(dtype)
            self.ref_flat = ref.reshape(-1).astype(dtype)
            self.shift = self.ref_flat.astype(np.float64) * np.repeat(sq, 3)
            return
        self.order = (3 * np.arange(g)[None, :] + np.arange(3)[:, None]).reshape(-1)
        wn = w / w.sum()
        cy = wn @ ref
        rc = ref - cy
        wc = np.zeros((self.d, 3))
        for a in range(3):
            wc[a::3, a] = wn
        self.w_centre = wc.astype(dtype)  # atom-major input -> (m, 3) weighted centres
        self.uniform = bool(np.all(sq == sq[0]))  # one scale for all atoms: folded into the rotation
        self.s0 = float(sq[0])
        self.sq = sq.astype(dtype)
        inv = np.divide(1.0, sq, out=np.zeros(g), where=sq > 0)  # a zero scale has a zero weight too
        wy = rc * wn[:, None] * (1.0 if self.uniform else inv[:, None])  # S from the centred (scaled) frame
        w9 = np.zeros((self.d, 9))
        for a in range(3):
            w9[a * g:(a + 1) * g, 3 * a:3 * a + 3] = wy
        self.w_corr = w9.astype(dtype)
        self.rc_scaled = np.ascontiguousarray((rc * sq[:, None]).T).astype(dtype)  # (3, g)
        self.shift = (self.rc_scaled.astype(np.float64) + np.outer(cy, sq)).reshape(-1)
        self._buf = np.zeros((0, 3, g), dtype=dtype)

    def displacements(self, x: np.ndarray, out: np.ndarray, on_rows: Any = None) -> np.ndarray | None:
        """Fitted, scaled displacements of a chunk.

        Parameters
        ----------
        x : (m, g, 3) nm (any float dtype; the arithmetic is in the working precision)
        out : (m, 3g) array of the working dtype, C-ordered; receives y in the column order ``order``

        on_rows : callable (i, j), optional
            Called after rows i:j of ``out`` are written (a cache-sized sub-block, still in the cache).

        Returns
        -------
        rotations (m, 3, 3) float64 (``x @ R`` convention), or None without fitting.
        """
        m, d = x.shape[0], self.d
        step = max(1, int(self.block_bytes // (d * np.dtype(self.dtype).itemsize)))
        rot = np.empty((m, 3, 3)) if self.fit else None
        for i in range(0, m, step):
            j = min(m, i + step)
            if rot is None:
                np.subtract(np.asarray(x[i:j]).reshape(j - i, d), self.ref_flat, out=out[i:j])
                out[i:j] *= self.sq3
            else:
                rot[i:j] = self._fit_block(x[i:j], out[i:j])
            if on_rows is not None:
                on_rows(i, j)
        return rot

    def _fit_block(self, x: np.ndarray, out: np.ndarray) -> np.ndarray:
        m, d, g = x.shape[0], self.d, self.g
        if self._buf.shape[0] < m:
            self._buf = np.empty((m, 3, g), dtype=self.dtype)
        xt = self._buf[:m]
        centre = np.asarray(x).reshape(m, d) @ self.w_centre  # (m, 3)
        if not np.all(np.isfinite(centre)):  # a NaN or inf anywhere in a frame makes its centre non-finite
            bad = np.flatnonzero(~np.all(np.isfinite(centre), axis=1))
            raise AnalysisError(f"non-finite positions (NaN or inf) in {bad.size} frame(s) of a block, the first "
                                f"at row {int(bad[0])}")
        np.subtract(np.asarray(x).transpose(0, 2, 1), centre[:, :, None], out=xt)  # centred, (m, 3, g)
        if not self.uniform:
            xt *= self.sq
        corr = (xt.reshape(m, d) @ self.w_corr).astype(np.float64).reshape(m, 3, 3)
        rot = qcp_rotations(corr)
        rt = rot.transpose(0, 2, 1) * self.s0 if self.uniform else rot.transpose(0, 2, 1)
        np.matmul(np.ascontiguousarray(rt, dtype=self.dtype), xt, out=out.reshape(m, 3, g))  # R^T (x - c)^T
        out -= self.rc_scaled.reshape(-1)
        return rot
