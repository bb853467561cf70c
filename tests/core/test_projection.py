"""Principal components: against scikit-learn / numpy SVD / mdtraj superposition, the quasi-harmonic
relation (Karplus and Kushick 1981), equipartition of the mode momenta, the cosine content of random
diffusion (Hess 2002), and the randomized route (Halko, Martinsson and Tropp 2011) against the exact one.
"""

from __future__ import annotations

import mdtraj as md
import numpy as np
import pytest
from sklearn.decomposition import PCA

from phasewake.core.analyses.coordinates import PC_BLOCK_FRAMES, compute_coordinates
from phasewake.core.analyses.projection import (
    compute_pca,
    cosine_content,
    pca_arrays,
    quasi_harmonic_frequencies,
)
from phasewake.core.progress import result_of
from phasewake.core.readers.memory import run_from_arrays
from phasewake.core.settings import chunking

KB = 0.00831446261815324  # kJ/mol/K (REFERENCES.md section 9)


def _correlated(n=4000, g=10, seed=0):
    rng = np.random.default_rng(seed)
    a = rng.normal(size=(3 * g, 3 * g)) / np.arange(1, 3 * g + 1)  # decaying spectrum
    pos = (rng.normal(size=(n, 3 * g)) @ a).reshape(n, g, 3) * 0.1 + rng.normal(size=(g, 3))
    return pos.astype(np.float32), rng.uniform(1, 16, g)


def test_exact_pca_matches_scikit_learn():
    pos, m = _correlated()
    res = pca_arrays(pos, m, mass_weighted=True, fit=False, n_components=6, block_frames=128)
    y = (pos.astype(np.float64) * np.sqrt(m)[None, :, None]).reshape(len(pos), -1)
    sk = PCA(n_components=6).fit(y)  # scikit-learn: covariance with ddof=1, like ours
    np.testing.assert_allclose(res.eigenvalues, sk.explained_variance_, rtol=1e-6)
    dots = np.abs(np.sum(res.eigenvectors * sk.components_.T, axis=0))
    np.testing.assert_allclose(dots, 1.0, atol=1e-6)
    np.testing.assert_allclose(res.explained_variance_ratio, sk.explained_variance_ratio_, rtol=1e-6)
    # projections: sklearn's transform up to the sign of each component
    signs = np.sign(np.sum(res.eigenvectors * sk.components_.T, axis=0))
    np.testing.assert_allclose(res.projections * signs, sk.transform(y), atol=1e-5 * np.sqrt(sk.explained_variance_[0]))
    assert res.eigenvalue_unit == "amu nm^2" and res.projection_unit == "nm amu^1/2"


@pytest.mark.slow  # measured 1.4 s of CPU
def test_streaming_equals_in_memory():
    pos, m = _correlated(n=3001)
    # the chunking itself changes nothing (all in float64)
    small = pca_arrays(pos, m, n_components=5, block_frames=7, precision="float64")
    whole = pca_arrays(pos, m, n_components=5, block_frames=len(pos), precision="float64")
    np.testing.assert_allclose(small.eigenvalues, whole.eigenvalues, rtol=1e-9)
    np.testing.assert_allclose(small.projections, whole.projections, atol=1e-9 * np.sqrt(whole.eigenvalues[0]))
    # the default: float32 GEMM per chunk accumulated in float64, against the all-float64 result
    f32 = pca_arrays(pos, m, n_components=5, block_frames=7)
    np.testing.assert_allclose(f32.eigenvalues, whole.eigenvalues, rtol=1e-6)
    np.testing.assert_allclose(f32.projections, whole.projections, atol=1e-5 * np.sqrt(whole.eigenvalues[0]))


def test_fitted_pca_matches_mdtraj_superposition():
    rng = np.random.default_rng(3)
    base = rng.normal(size=(12, 3)) * 0.5
    n = 600
    pos = base[None] + 0.03 * rng.normal(size=(n, 12, 3))
    rots = np.linalg.qr(rng.normal(size=(n, 3, 3)))[0]
    rots *= np.sign(np.linalg.det(rots))[:, None, None]
    pos = np.einsum("nia,nab->nib", pos, rots) + rng.normal(size=(n, 1, 3))
    pos = pos.astype(np.float32)
    res = pca_arrays(pos, np.ones(12), mass_weighted=False, fit=True, n_components=4)
    traj = md.Trajectory(pos.copy(), None)
    traj.superpose(traj, 0)  # mdtraj: unweighted optimal superposition on frame 0
    y = traj.xyz.reshape(n, -1).astype(np.float64)
    ev = np.linalg.svd(y - y.mean(0), compute_uv=False) ** 2 / (n - 1)  # numpy SVD
    np.testing.assert_allclose(res.eigenvalues, ev[:4], rtol=2e-3)  # mdtraj superposes in float32


def test_quasi_harmonic_eigenvalues_and_mode_momenta():
    """lambda_k = kT/w_k^2 (Karplus and Kushick 1981) within 2%; <p_k^2> = kT (REFERENCES.md 7.1-7.2)."""
    rng = np.random.default_rng(11)
    n = 200_000
    masses = np.array([1.008, 15.999, 12.011])
    ks = np.array([400.0, 150.0, 50.0])  # kJ/mol/nm^2
    kt = 2.494  # kJ/mol (about 300 K)
    T = kt / KB
    pos = np.zeros((n, 3, 3))
    vel = rng.normal(size=(n, 3, 3)) * np.sqrt(kt / masses)[None, :, None]
    for j in range(3):  # oscillator j moves atom j along axis j; exact canonical samples
        pos[:, j, j] = rng.normal(size=n) * np.sqrt(kt / ks[j])
    pos += np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0]])
    res = pca_arrays(pos, masses, velocities_nm_per_ps=vel, mass_weighted=True, fit=False, n_components=3,
                     block_frames=20_000)
    w2 = ks / masses
    expected = np.sort(kt / w2)[::-1]
    np.testing.assert_allclose(res.eigenvalues, expected, rtol=0.02)
    np.testing.assert_allclose(quasi_harmonic_frequencies(res.eigenvalues, T), np.sort(np.sqrt(w2)), rtol=0.02)
    p2 = np.mean(res.momenta**2, axis=0)
    np.testing.assert_allclose(p2, kt, rtol=5 * np.sqrt(2.0 / n))  # 5 sigma of a chi^2 mean


def test_randomized_route_matches_exact():
    pos, m = _correlated(n=5000, g=20, seed=5)
    exact = pca_arrays(pos, m, n_components=5, fit=False, projections=False)
    fast = pca_arrays(pos, m, n_components=5, fit=False, method="randomized", n_iter=4, oversample=10,
                      projections=False, seed=1)
    np.testing.assert_allclose(fast.eigenvalues, exact.eigenvalues, rtol=1e-4)
    overlap = np.abs(np.sum(fast.eigenvectors[:, :3] * exact.eigenvectors[:, :3], axis=0))
    np.testing.assert_allclose(overlap, 1.0, atol=1e-3)
    # both routes form float32 products (float32 eps = 1.2e-7), in blocks whose sizes follow the chunk
    # budget: they agree to a few float32 roundings, not below one (1.1e-7 apart was measured)
    np.testing.assert_allclose(fast.total_variance, exact.total_variance, rtol=1e-6)


def test_cosine_content_of_random_diffusion():
    """Hess 2002: the leading PCs of a random walk are near-cosines (cosine content close to 1)."""
    rng = np.random.default_rng(2)
    n, g = 4000, 30
    walk = np.cumsum(rng.normal(size=(n, g, 3)), axis=0) * 0.01
    res = pca_arrays(walk.astype(np.float32), np.ones(g), mass_weighted=False, fit=False, n_components=3)
    assert res.cosine_content[0] > 0.7
    noise = rng.normal(size=(n, g, 3)).astype(np.float32)
    res2 = pca_arrays(noise, np.ones(g), mass_weighted=False, fit=False, n_components=3)
    assert np.all(res2.cosine_content < 0.05)
    # analytic: a pure cosine with k half periods has cosine content 1 (definition, Hess 2002)
    t = (np.arange(1000) + 0.5) / 1000
    assert abs(cosine_content(np.cos(2 * np.pi * t), 2) - 1) < 1e-9


def test_pc_coordinate_has_unit_mass_and_matches_projection():
    pos, m = _correlated(n=800, g=6, seed=9)
    rng = np.random.default_rng(4)
    vel = rng.normal(size=pos.shape).astype(np.float32)
    run = run_from_arrays(pos, np.arange(len(pos)) * 0.1, m, velocities_nm_per_ps=vel)
    # the same blocks of frames as the PCA inside compute_coordinates (float32 sums depend on the blocks),
    # read in chunks of 50 frames
    res = result_of(compute_pca(run, n_components=3, fit=True, block_frames=PC_BLOCK_FRAMES))
    with chunking(frames=50):
        s1, s3 = result_of(compute_coordinates(run, ["pc(1)", "pc(3, 0-5)"]))
    np.testing.assert_allclose(s1.values, res.projections[:, 0], atol=1e-6 * np.sqrt(res.eigenvalues[0]))
    np.testing.assert_allclose(s3.values, res.projections[:, 2], atol=1e-6 * np.sqrt(res.eigenvalues[0]))
    np.testing.assert_allclose(s1.m_eff, 1.0, rtol=1e-9)  # orthogonal mass-weighted transform (7.3)
    np.testing.assert_allclose(s1.momentum, res.momenta[:, 0], atol=1e-6)
    assert s1.unit == "nm amu^1/2"


def test_single_pass_nystrom_route():
    """Tropp, Yurtsever, Udell and Cevher 2017: one pass, Nystrom approximation; checked against exact."""
    pos, m = _correlated(n=5000, g=20, seed=5)
    exact = pca_arrays(pos, m, n_components=3, fit=False, projections=False)
    one = pca_arrays(pos, m, n_components=3, fit=False, method="randomized", n_iter=0, oversample=20,
                     projections=False, seed=2)
    np.testing.assert_allclose(one.eigenvalues, exact.eigenvalues, rtol=0.02)
    overlap = np.abs(np.sum(one.eigenvectors[:, :2] * exact.eigenvectors[:, :2], axis=0))
    assert np.all(overlap > 0.99)


def test_cosine_content_verdict():
    from phasewake.core.analyses.projection import cosine_content_verdict
    from phasewake.core.analyses.verdicts import EXPLANATIONS

    rng = np.random.default_rng(8)
    walk = np.cumsum(rng.normal(size=(3000, 20, 3)), axis=0).astype(np.float32)
    v = cosine_content_verdict(pca_arrays(walk, np.ones(20), fit=False, n_components=2))
    assert v.level == "problem" and "pca.cosine_content" in EXPLANATIONS  # random diffusion (Hess 2002)
    still = rng.normal(size=(3000, 20, 3)).astype(np.float32)
    assert cosine_content_verdict(pca_arrays(still, np.ones(20), fit=False, n_components=2)).level == "ok"


@pytest.mark.slow  # measured 0.8 s of CPU
def test_many_coordinates_lanczos_route_matches_numpy():
    """d = 600 >= 500 with k = 5: the Lanczos (ARPACK) route against numpy's dense eigh."""
    pos, m = _correlated(n=1500, g=200, seed=12)
    res = pca_arrays(pos, m, n_components=5, fit=False, projections=False, precision="float64")
    y = (pos.astype(np.float64) * np.sqrt(m)[None, :, None]).reshape(len(pos), -1)
    w = np.linalg.eigvalsh(np.cov(y, rowvar=False))[::-1][:5]  # numpy
    np.testing.assert_allclose(res.eigenvalues, w, rtol=1e-8)


def test_stride_and_reader_chunks():
    """A strided PCA equals the PCA of the strided frames (definition), and the reader's chunking (a 7-frame
    chunk budget) changes nothing: the products run on blocks of block_frames frames."""
    pos, m = _correlated(n=900, g=8, seed=13)
    run = run_from_arrays(pos, np.arange(len(pos)) * 0.1, m)
    strided = result_of(compute_pca(run, stride=3, n_components=3, block_frames=64))
    direct = pca_arrays(pos[::3], m, n_components=3, block_frames=64)
    np.testing.assert_array_equal(strided.eigenvalues, direct.eigenvalues)
    np.testing.assert_array_equal(strided.projections, direct.projections)
    assert strided.stride == 3 and strided.n_frames == 300
    with chunking(mb=8 * 12 * 7 / 1e6):  # 7 frames of 8 atoms per chunk
        small = result_of(compute_pca(run, n_components=3, block_frames=64))
    whole = result_of(compute_pca(run, n_components=3, block_frames=64))
    np.testing.assert_array_equal(small.eigenvalues, whole.eigenvalues)
    np.testing.assert_array_equal(small.eigenvectors, whole.eigenvectors)


def test_non_finite_positions_are_named():
    from phasewake.core.errors import AnalysisError

    pos, m = _correlated(n=300, g=5, seed=14)
    pos[123, 2, 1] = np.nan
    for fit in (True, False):
        with pytest.raises(AnalysisError, match="non-finite"):
            pca_arrays(pos, m, fit=fit, n_components=2, block_frames=100)
    pos[123, 2, 1] = 0.0
    pos[0, 1, 0] = np.inf  # in the reference frame
    with pytest.raises(AnalysisError, match="reference"):
        pca_arrays(pos, m, n_components=2)
