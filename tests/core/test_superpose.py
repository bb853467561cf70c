"""Batched superposition (core/superpose.py): quaternion rotations (Horn 1987, Theobald 2005) against
scipy's ``Rotation.align_vectors`` (outside reference) and against the float64 batched-SVD route
(Kabsch 1976, ``coordinates.kabsch``); the float32 fitted displacements and the PCA eigenvalues they give
against the float64 route, with the tolerances stated in core/superpose.py.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from phasewake.core.analyses.coordinates import kabsch
from phasewake.core.analyses.projection import pca_arrays
from phasewake.core.analyses.superpose import FrameFitter, qcp_rotations


def _frames(n=300, g=40, seed=0, noise=0.05, offset=5.0):
    rng = np.random.default_rng(seed)
    ref = rng.normal(size=(g, 3)) * np.array([1.5, 1.0, 0.6])
    rots = Rotation.random(n, random_state=seed).as_matrix()  # column convention
    x = np.einsum("ia,nba->nib", ref, rots) + noise * rng.normal(size=(n, g, 3))
    x += rng.uniform(-offset, offset, size=(n, 1, 3)) + offset  # far from the origin, like box coordinates
    return x, ref, rng.uniform(1.0, 16.0, g)


def _correlation(x, ref, w):
    wn = w / w.sum()
    a = x - np.einsum("i,nia->na", wn, x)[:, None, :]
    b = ref - wn @ ref
    return np.einsum("i,nia,ib->nab", wn, a, b), a, b


def test_rotations_match_scipy_align_vectors():
    x, ref, w = _frames(n=6, g=25, seed=1)
    s, a, b = _correlation(x, ref, w)
    rot = qcp_rotations(s)
    for f in range(6):
        # scipy: the rotation C minimising sum w |b_i - C a_i|^2 (column vectors); ours: a_i @ R ~ b_i
        c, _ = Rotation.align_vectors(b, a[f], weights=w)
        np.testing.assert_allclose(rot[f], c.as_matrix().T, atol=1e-10)
    np.testing.assert_allclose(np.linalg.det(rot), 1.0, atol=1e-12)


def test_rotations_match_batched_svd_route_including_hard_cases():
    x, ref, w = _frames(n=200, g=30, seed=2)
    # hard cases: the reference itself (identity), a 180 degree turn (quaternion scalar part 0), a mirror
    # image (best proper rotation, det +1), a planar group
    x[0] = ref
    x[1] = ref @ np.diag([-1.0, -1.0, 1.0])
    x[2] = ref @ np.diag([1.0, 1.0, -1.0])
    rot = qcp_rotations(_correlation(x, ref, w)[0])
    rk, _, _ = kabsch(x, ref, w)  # float64 batched SVD (Kabsch 1976)
    np.testing.assert_allclose(rot, rk, atol=1e-9)
    np.testing.assert_allclose(rot[0], np.eye(3), atol=1e-12)
    planar = ref.copy()
    planar[:, 2] = 0.0
    xp = np.einsum("ia,nba->nib", planar, Rotation.random(20, random_state=3).as_matrix())
    np.testing.assert_allclose(qcp_rotations(_correlation(xp, planar, w)[0]), kabsch(xp, planar, w)[0], atol=1e-9)


def test_degenerate_groups_give_the_optimal_fit():
    rng = np.random.default_rng(4)
    # one atom: nothing to rotate (identity); two atoms: the rotation about the bond is free, but the fitted
    # positions are determined, and equal those of the SVD route
    one = rng.normal(size=(5, 1, 3))
    assert np.allclose(qcp_rotations(_correlation(one, one[0], np.ones(1))[0]), np.eye(3))
    ref2 = np.array([[0.0, 0.0, 0.0], [0.12, 0.05, -0.03]])
    x2 = np.einsum("ia,nba->nib", ref2, Rotation.random(10, random_state=5).as_matrix()) + rng.normal(size=(10, 1, 3))
    s, a, b = _correlation(x2, ref2, np.ones(2))
    rot = qcp_rotations(s)
    rk, _, _ = kabsch(x2, ref2)
    np.testing.assert_allclose(np.einsum("nia,nab->nib", a, rot), np.einsum("nia,nab->nib", a, rk), atol=1e-9)
    np.testing.assert_allclose(np.einsum("nia,nab->nib", a, rot), np.broadcast_to(b, a.shape), atol=1e-9)


@pytest.mark.parametrize("uniform", [False, True])
def test_float32_fit_against_float64_route(uniform):
    x, ref, w = _frames(n=400, g=60, seed=6)
    x = x.astype(np.float32)
    if uniform:
        w = np.full(w.shape, 39.948)
    ref = x[0].astype(np.float64)
    sq = np.sqrt(w)
    fitter = FrameFitter(ref, w, scale=sq)
    y = np.empty((x.shape[0], 3 * ref.shape[0]), np.float32)
    rot = fitter.displacements(x, y)
    rk, cx, cy = kabsch(x, ref, w)  # the float64 route
    y64 = ((np.matmul(x - cx[:, None, :], rk) + cy - ref) * sq[None, :, None]).reshape(x.shape[0], -1)
    np.testing.assert_allclose(rot, rk, atol=1e-5)  # stated: rotations to ~1e-6 (float32 products)
    scale = np.abs(x).max() * sq.max()
    np.testing.assert_allclose(y, y64[:, fitter.order], atol=2e-6 * scale)  # float32 rounding of ~|x| s
    # y + shift = s * fitted positions, in the output's column order
    fitted = (np.matmul(x - cx[:, None, :], rk) + cy) * sq[None, :, None]
    np.testing.assert_allclose(y + fitter.shift, fitted.reshape(x.shape[0], -1)[:, fitter.order],
                               atol=2e-6 * scale)
    # float64 working precision: the same as the SVD route to rounding
    f64 = FrameFitter(ref, w, scale=sq, dtype=np.float64)
    y2 = np.empty(y.shape)
    np.testing.assert_allclose(f64.displacements(x, y2), rk, atol=1e-10)
    np.testing.assert_allclose(y2, y64[:, f64.order], atol=1e-10 * scale)


def test_pca_eigenvalues_float32_fit_against_float64_reference():
    """Fitted PCA with the float32 fit vs a float64 reference built here: coordinates.kabsch (SVD),
    numpy covariance and eigh. Stated tolerance: 1e-5 relative on the eigenvalues."""
    rng = np.random.default_rng(7)
    n, g = 3000, 20
    base = rng.normal(size=(g, 3)) * 0.6
    modes = rng.normal(size=(3, g, 3))
    amp = rng.normal(size=(n, 3)) * np.array([0.12, 0.06, 0.03])
    inner = base + np.einsum("nk,kia->nia", amp, modes) + 0.005 * rng.normal(size=(n, g, 3))
    rots = Rotation.random(n, random_state=8).as_matrix()
    pos = (np.einsum("nia,nba->nib", inner, rots) + rng.uniform(0, 6, size=(n, 1, 3))).astype(np.float32)
    m = rng.uniform(1, 16, g)
    res = pca_arrays(pos, m, n_components=4, projections=False)
    ref = pos[0].astype(np.float64)
    rk, cx, cy = kabsch(pos, ref, m)
    y = ((np.matmul(pos - cx[:, None, :], rk) + cy) * np.sqrt(m)[None, :, None]).reshape(n, -1)
    w = np.linalg.eigvalsh(np.cov(y, rowvar=False))[::-1][:4]  # numpy, float64
    np.testing.assert_allclose(res.eigenvalues, w, rtol=1e-5)
    np.testing.assert_allclose(res.mean, y.mean(axis=0), atol=1e-5 * np.abs(y).max())
