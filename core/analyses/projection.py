"""Principal components of a run (essential dynamics), streamed over frame chunks.

Method (Amadei, Linssen and Berendsen, Proteins 17, 412 (1993)): fit every frame of an atom group
onto a reference by optimal superposition (Kabsch 1976, mass-weighted when ``mass_weighted``), form
y = M^1/2 x (or y = x), the covariance C = <(y - <y>)(y - <y>)^T>, and its eigenvectors e_k and
eigenvalues lambda_k. Projections q_k(t) = e_k . (y(t) - <y>); their conjugate momenta are the
projections of the mass-weighted velocities (rotated with the same fit), p_k = e_k . M^1/2 v. For
mass-weighted coordinates the transformation is orthogonal, so each mode has unit effective mass and
the equipartition check is <p_k^2> = kT.

Quasi-harmonic frequencies: for a harmonic system lambda_k = kT / omega_k^2 (Karplus and Kushick,
Macromolecules 14, 325 (1981)), so omega_k = sqrt(kT / lambda_k).

Cosine content (Hess, Phys. Rev. E 65, 031910 (2002)): c_k = (2/T) (int cos(k pi t/T) q_k dt)^2 /
int q_k^2 dt. Values near 1 for the leading components say they look like random diffusion (the
run has not sampled an equilibrium distribution along them), not like real motions.

Two routes:

* ``method="exact"``: one pass accumulating sum(y) and y^T y per block of frames (BLAS syrk in float32
  on the fitted displacements from the reference, added into float64), then the leading k eigenpairs of
  the symmetric matrix (Lanczos, or LAPACK syevr on an index subset); the total variance is the exact
  trace.
* ``method="randomized"``: randomized subspace iteration for the leading components (Halko,
  Martinsson and Tropp, SIAM Rev. 53, 217 (2011), Alg. 4.4 with a Rayleigh-Ritz step, Alg. 5.3):
  each pass multiplies the centred data by a thin block (n x d x l flops instead of n x d^2), so the
  cost grows with the number of components wanted, not with d^2. The total variance (trace) is exact.
  With ``n_iter=0`` it reads the data once and uses the stabilised Nystrom approximation (Tropp,
  Yurtsever, Udell and Cevher, NeurIPS 2017): the cheapest route, less accurate when the spectrum
  decays slowly. ``n_iter`` > 0 reads the frames ``n_iter + 1`` times (range finder passes, then the
  Rayleigh-Ritz step on the last sketch).

Chunk reductions (issue 9): the accumulation is :class:`PCAReduction` (``prepare``, ``update(chunk)``,
``finish()``, the ``onepass.ChunkConsumer`` protocol) and the projections are :class:`PCAProjection`, a
second reduction that needs the eigenvectors. :func:`compute_pca` drives them through ``onepass.feed``
(the loop of ``onepass.run_pass``), so ``onepass.PCAConsumer`` in a shared pass with other analyses gives
bitwise the same result as ``compute_pca(..., projections=False)`` with the same settings. A one-pass
consumer supports the exact route and the single-pass sketch (``n_iter=0``) only.

Reference structure: ``reference_nm`` if given, else the first frame of the window (taken from the first
chunk of the pass, so no extra read). There is no iterative mean-structure refit; fitting onto the mean
would need a second pass (fit, average, refit), which a user can do by passing the ``mean`` of a first
PCA (reshaped to (g, 3), divided by sqrt(mass)) as ``reference_nm``.

Fitting (``core/superpose.py``): per block, centres and correlation matrices by BLAS products, rotations
by the quaternion method (Horn 1987; Theobald 2005) in float64, the fitted block in float32 in a
component-major layout (x0 x1 ... y0 ... z0 ...; eigenvectors and means are returned atom-major). Blocks
of ``chunk_frames`` frames are gathered across the reader's chunks, so the result does not depend on
how a reader cuts the frames. The projection pass fits in float64 (as :func:`pc_value_and_gradient`).

Memory is bounded by the block size and d x d (exact) or d x l (randomized), never the file.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.analyses.coordinates import kabsch, solute_atoms
from phasewake.core.analyses.verdicts import HEURISTIC_NOTE, Explanation, Threshold, Verdict, judge, register
from phasewake.core.errors import AnalysisError, MissingDataError, TooShortError
from phasewake.core.model.run import DEFAULT_CHUNK_FRAMES, FrameChunk
from phasewake.core.progress import Progress, Work
from phasewake.core.units import KB_KJ_PER_MOL_K

if TYPE_CHECKING:
    from phasewake.core.model.run import Run

C_CM_PER_PS = 2.99792458e-2  # speed of light (exact), cm/ps
# Frames per block of the PCA's products: the d x d accumulation is paid once per block, so blocks are
# longer than the reader's chunks; at most PCA_CHUNK_FRAMES frames and PCA_BLOCK_BYTES per block buffer.
PCA_CHUNK_FRAMES = 2048
PCA_BLOCK_BYTES = 32 * 2**20


def default_block_frames(n_coordinates: int, itemsize: int = 4) -> int:
    """Frames per PCA block when ``chunk_frames`` is not given: min(PCA_CHUNK_FRAMES, PCA_BLOCK_BYTES / row)."""
    return int(max(16, min(PCA_CHUNK_FRAMES, PCA_BLOCK_BYTES // max(1, n_coordinates * itemsize))))

register(
    Threshold(
        kind="pca.cosine_content", caution=0.5, problem=0.7, unit="",
        source="Hess, Phys. Rev. E 65, 031910 (2002) (values near 1 mean random diffusion, from memory); "
               "the limits 0.5 and 0.7 are common practice",
        description="cosine content of a leading principal component",
    ),
    Explanation(
        title="Cosine content of a principal component",
        what="How much the projection of the run on a leading principal component looks like a half-cosine "
             "with k half periods over the whole run.",
        method="c_k = (2/T) (integral cos(k pi t/T) q_k(t) dt)^2 / integral q_k(t)^2 dt (Hess 2002), midpoint "
               "rule over the frames.",
        threshold="caution above 0.5, problem above 0.7 (common practice; Hess 2002 shows that random "
                  "diffusion gives values near 1 for the first components).",
        advice="Run longer or treat that component as unconverged; it is a heuristic, not a proof.",
    ),
)


@dataclass(frozen=True)
class PCAResult:
    """Principal components of an atom group.

    atom_indices : (g,) atoms of the run used (d = 3 g coordinates, ordered atom-major: x0 y0 z0 x1 ...)
    reference_nm : (g, 3) structure the frames were fitted onto
    mean : (d,) mean of y (nm, or nm amu^1/2 when mass-weighted)
    eigenvalues : (k,) in ``eigenvalue_unit`` (nm^2, or amu nm^2 when mass-weighted), descending
    eigenvectors : (d, k), orthonormal columns
    total_variance : trace of the covariance, same unit as eigenvalues
    explained_variance_ratio : (k,)
    cosine_content : (k,) or None (Hess 2002)
    projections : (n_frames, k) q_k(t) in ``projection_unit``, or None
    momenta : (n_frames, k) p_k(t) in ``momentum_unit``, or None (no velocities)
    time_ps : (n_frames,) or None
    """

    atom_indices: np.ndarray
    masses_amu: np.ndarray
    reference_nm: np.ndarray
    mean: np.ndarray
    eigenvalues: np.ndarray
    eigenvectors: np.ndarray
    total_variance: float
    explained_variance_ratio: np.ndarray
    n_frames: int
    eigenvalue_unit: str
    projection_unit: str
    momentum_unit: str
    cosine_content: np.ndarray | None = None
    projections: np.ndarray | None = None
    momenta: np.ndarray | None = None
    time_ps: np.ndarray | None = None
    velocities_estimated: bool = False
    # settings that produced it
    mass_weighted: bool = True
    fit: bool = True
    method: str = "exact"
    n_components: int = 10
    start: int = 0
    stop: int | None = None
    stride: int = 1
    chunk_frames: int = DEFAULT_CHUNK_FRAMES
    n_iter: int = 0
    oversample: int = 0
    seed: int = 0
    precision: str = "float32"

    def quasi_harmonic_frequencies_rad_per_ps(self, temperature_K: float) -> np.ndarray:
        """omega_k = sqrt(kT / lambda_k) (Karplus and Kushick 1981); meaningful when mass-weighted."""
        return quasi_harmonic_frequencies(self.eigenvalues, temperature_K)


def quasi_harmonic_frequencies(eigenvalues_amu_nm2: np.ndarray, temperature_K: float) -> np.ndarray:
    """Quasi-harmonic angular frequencies in rad/ps from mass-weighted eigenvalues (amu nm^2).

    omega = sqrt(kT/lambda) with kT in kJ/mol = amu nm^2/ps^2 (Karplus and Kushick 1981).
    Divide by 2 pi c (c = 0.0299792458 cm/ps) for wavenumbers in cm^-1.
    """
    kt = KB_KJ_PER_MOL_K * float(temperature_K)
    return np.sqrt(kt / np.asarray(eigenvalues_amu_nm2, dtype=np.float64))


def cosine_content(q: np.ndarray, k: int) -> float:
    """Cosine content of a projection with the cosine of half-period count ``k`` (Hess 2002).

    q : (n_frames,) equally spaced in time. Midpoint rule: t_j = (j + 1/2) T/n.
    """
    q = np.asarray(q, dtype=np.float64)
    q = q - q.mean()
    n = q.shape[0]
    c = np.cos(k * np.pi * (np.arange(n) + 0.5) / n)
    den = float(q @ q)
    if den == 0.0:
        return float("nan")
    return float(2.0 / n * (c @ q) ** 2 / den)


def _fitted(x: np.ndarray, reference: np.ndarray, weights: np.ndarray, fit: bool) -> tuple[np.ndarray, np.ndarray | None]:
    """Fit frames (n, g, 3) onto reference; returns fitted positions and the rotations (or None)."""
    if not fit:
        return x.astype(np.float64), None
    rot, cx, cy = kabsch(x, reference, weights)
    return np.matmul(x - cx[:, None, :], rot) + cy, rot


def pc_value_and_gradient(pca: PCAResult, k: int, positions_nm: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Value of component k (0-based) and its gradient with respect to the group's atoms.

    positions_nm : (n, g, 3) positions of ``pca.atom_indices``. The gradient treats the fitting
    rotation as fixed for the frame (exact without fitting; for a mass-weighted fit the translation
    part drops out exactly because the modes are orthogonal to rigid translations).

    Returns values (n,) and gradient (n, g, 3).
    """
    x = np.asarray(positions_nm, dtype=np.float64)
    sq = np.sqrt(pca.masses_amu) if pca.mass_weighted else np.ones(pca.masses_amu.shape[0])
    xf, rot = _fitted(x, pca.reference_nm, pca.masses_amu if pca.mass_weighted else np.ones_like(sq), pca.fit)
    e = pca.eigenvectors[:, k].reshape(-1, 3)
    y = xf * sq[None, :, None] - pca.mean.reshape(-1, 3)[None]
    q = np.einsum("nia,ia->n", y, e)
    a = sq[:, None] * e
    grad = np.broadcast_to(a, x.shape).copy() if rot is None else np.einsum("nab,ib->nia", rot, a)
    return q, grad


def _leading_eigenpairs(cov: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    """The k largest eigenpairs of a symmetric matrix.

    Few of many (k <= d/10, d >= 500): Lanczos (scipy.sparse.linalg.eigsh, ARPACK), relative tolerance
    1e-10 (eigenvalues then agree with a machine-precision run to ~1e-14), from a fixed start vector, so
    results are reproducible; otherwise LAPACK syevr on the index subset (scipy.linalg.eigh).
    """
    d = cov.shape[0]
    if d >= 500 and k <= d // 10:
        from scipy.sparse.linalg import ArpackError, eigsh

        v0 = np.cos(np.arange(d) * 0.7071067811865476) + 1.5  # fixed, not orthogonal to anything special
        try:
            # ncv = 40 Lanczos vectors (ARPACK's default is 2k + 1): fewer restarts when the top of the
            # spectrum is crowded; tol 1e-10 (relative, on the Ritz values) instead of machine precision.
            # 3000 coordinates of noise, one core: 2.2 -> 1.4 s; eigenvalues the same to 6e-15 and
            # eigenvectors to 1e-15 (1 - overlap) as with tol = 0 (the error of a Ritz value is about the
            # square of its residual)
            w, v = eigsh(cov, k=k, which="LA", v0=v0, tol=1e-10, ncv=min(d - 1, max(2 * k + 1, 40)))
            return w, v
        except ArpackError:  # no convergence: fall back to the dense route below
            pass
    import scipy.linalg

    return scipy.linalg.eigh(cov, subset_by_index=[d - k, d - 1], driver="evr")  # type: ignore[no-any-return]


def _nystrom(omega: np.ndarray, y: np.ndarray, k: int, eps: float) -> tuple[np.ndarray, np.ndarray]:
    """Leading eigenpairs of a PSD matrix C from one sketch Y = C Omega (Omega orthonormal, d x l).

    The stabilised Nystrom approximation C ~ Y (Omega^T Y)^+ Y^T of Tropp, Yurtsever, Udell and
    Cevher, "Fixed-rank approximation of a positive-semidefinite matrix from streaming data", NeurIPS
    2017 (Alg. 3): shift by nu = sqrt(d) eps ||Y||, Cholesky of Omega^T Y_nu, SVD, remove the shift.
    """
    d = y.shape[0]
    nu = np.sqrt(d) * eps * np.linalg.norm(y, 2)
    y_nu = y + nu * omega
    b = omega.T @ y_nu
    b = 0.5 * (b + b.T)
    try:
        chol = np.linalg.cholesky(b)
        e = np.linalg.solve(chol, y_nu.T).T
    except np.linalg.LinAlgError:
        w, v = np.linalg.eigh(b)
        keep = w > w.max() * 1e-12
        e = y_nu @ v[:, keep] / np.sqrt(w[keep])
    u, sv, _ = np.linalg.svd(e, full_matrices=False)
    lam = np.clip(sv**2 - nu, 0.0, None)
    return lam[:k], u[:, :k]


def _group_and_masses(run: Run, atom_indices: Sequence[int] | np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
    if atom_indices is None:
        idx = solute_atoms(run.topology, run.n_atoms)
    else:
        idx = np.asarray(atom_indices, dtype=np.int64)
    if idx.size == 0:
        raise AnalysisError("the PCA group has no atoms")
    if idx.min() < 0 or idx.max() >= run.n_atoms:
        raise AnalysisError(f"PCA atom index out of range (the run has {run.n_atoms} atoms)")
    return idx, np.asarray(run.masses_amu, dtype=np.float64)[idx]


def _path(run: Run) -> Any:
    return run.paths[0] if run.paths else None


def _group_columns(idx: np.ndarray, n_atoms: int) -> np.ndarray | None:
    """Run atoms a PCA reads (sorted, unique), or None when the group is every atom in order."""
    if idx.size == n_atoms and np.array_equal(idx, np.arange(n_atoms)):
        return None
    return np.unique(idx)


def _local_positions(columns: np.ndarray | None, idx: np.ndarray, n_atoms: int) -> np.ndarray | None:
    """Where the group's atoms sit on a chunk's atom axis (None: the chunk is the group, in order)."""
    if columns is None:
        return None if np.array_equal(idx, np.arange(n_atoms)) else idx
    pos = np.searchsorted(columns, idx)
    if np.any(pos >= columns.size) or np.any(columns[np.minimum(pos, columns.size - 1)] != idx):
        raise AnalysisError("the PCA group's atoms are not among the atoms read by the pass")
    if pos.size == columns.size and np.array_equal(pos, np.arange(columns.size)):
        return None
    return pos.astype(np.int64)


class _Accumulator:
    """Frames gathered into blocks of ``block`` frames, fitted (``superpose.FrameFitter``) a block at a time;
    per block of fitted displacements y either y^T y (exact: BLAS syrk in the working precision, upper triangle added into float64) or the sketch
    y^T (y Omega) (randomized), plus sum(y) and sum |y|^2 in float64.

    The sketch products and sums run on each cache-sized sub-block of the fit right after it is written
    (``FrameFitter.displacements(on_rows=)``), the exact route's syrk on the whole block.
    Blocks, not the reader's chunks, set the rounding (BLAS kernels round differently for different row
    counts): results depend on ``block`` only, so a PCA fed from a shared pass (other consumers, other
    chunk sizes) equals the separate call bitwise.
    """

    def __init__(self, fitter: Any, *, block: int, mode: str, omega: np.ndarray | None = None,
                 sums: bool = True) -> None:
        self.fitter, self.block, self.mode, self.sums = fitter, int(block), mode, sums
        d, dt = fitter.d, fitter.dtype
        self.d = d
        self.ybuf = np.empty((self.block, d), dtype=dt)
        self.xbuf: np.ndarray | None = None  # positions of a block being gathered across chunks
        self.fill = 0
        self.n = 0
        self.s1 = np.zeros(d)
        self.sqnorm = 0.0
        if mode == "exact":
            from scipy.linalg import blas

            self._syrk = blas.ssyrk if dt is np.float32 else blas.dsyrk
            self.s2 = np.zeros((d, d), order="F")
            self._prod = np.zeros((d, d), dtype=dt, order="F")
        else:
            assert omega is not None
            self.omega = omega
            self._omega_t = np.ascontiguousarray(omega, dtype=dt)
            self.z = np.zeros((d, omega.shape[1]))

    def __getstate__(self) -> dict[str, Any]:
        """Without the BLAS routine and the scratch blocks (a worker process sends this back)."""
        state = dict(self.__dict__)
        for name in ("_syrk", "ybuf", "_prod"):
            state.pop(name, None)
        if state.get("xbuf") is not None:
            state["xbuf"] = state["xbuf"][: self.fill].copy() if self.fill else None
        return state

    def __setstate__(self, state: dict[str, Any]) -> None:
        self.__dict__.update(state)
        dt = self.fitter.dtype
        self.ybuf = np.empty((self.block, self.d), dtype=dt)
        if self.xbuf is not None:
            xbuf = np.empty((self.block,) + self.xbuf.shape[1:], dtype=self.xbuf.dtype)
            xbuf[: self.fill] = self.xbuf[: self.fill]
            self.xbuf = xbuf
        if self.mode == "exact":
            from scipy.linalg import blas

            self._syrk = blas.ssyrk if dt is np.float32 else blas.dsyrk
            self._prod = np.zeros((self.d, self.d), dtype=dt, order="F")

    def merge(self, later: _Accumulator) -> None:
        """Add the sums of ``later`` (the frames after these; same fit and sketch); both are flushed first."""
        self.flush()
        later.flush()
        self.n += later.n
        self.s1 += later.s1
        self.sqnorm += later.sqnorm
        if self.mode == "exact":
            self.s2 += later.s2
        else:
            self.z += later.z

    def update(self, x: np.ndarray) -> None:
        """Positions (m, g, 3) of the next frames, in order."""
        i, m, b = 0, x.shape[0], self.block
        if self.xbuf is None:
            self.xbuf = np.empty((b,) + x.shape[1:], dtype=np.result_type(x.dtype, self.fitter.dtype))
        while i < m:
            if self.fill == 0 and m - i >= b and x.dtype == self.xbuf.dtype:
                self._fit_reduce(x[i:i + b])  # a whole block straight from the chunk (the usual case)
                i += b
                continue
            p = min(b - self.fill, m - i)
            self.xbuf[self.fill:self.fill + p] = x[i:i + p]
            self.fill += p
            i += p
            if self.fill == b:
                self._fit_reduce(self.xbuf)
                self.fill = 0

    def flush(self) -> None:
        if self.fill:
            assert self.xbuf is not None
            self._fit_reduce(self.xbuf[:self.fill])
            self.fill = 0

    def _fit_reduce(self, x: np.ndarray) -> None:
        y = self.ybuf[:x.shape[0]]
        # the fit's products are skinny (3 and 9 columns): one BLAS thread, as for other short products on
        # this shared machine (correlation.one_blas_thread); the block's big products below keep them all
        sub = self.mode != "exact"
        try:
            with _few_threads(y.size):
                # the sketch products run on each fitted sub-block while it is in the cache; the exact
                # route's syrk wants the whole block (long products)
                self.fitter.displacements(x, y, on_rows=(lambda i, j: self._reduce(y[i:j])) if sub else None)
        except AnalysisError as exc:
            raise AnalysisError(f"{exc}; the block starts at frame {self.n} of the PCA window (counted from its "
                                "first frame)") from exc
        if not sub:
            self._reduce(y)

    def _reduce(self, y: np.ndarray) -> None:
        m = y.shape[0]
        if self.mode == "exact":
            # y^T y by the symmetric rank-k update (upper triangle only, half the flops of a GEMM)
            prod = self._syrk(1.0, y.T, beta=0.0, c=self._prod, trans=0, lower=0, overwrite_c=1)
            self._prod = prod
            d = self.d
            step = 256  # add the upper triangle only, by column panels (Fortran order: contiguous columns)
            for j0 in range(0, d, step):
                j1 = min(d, j0 + step)
                self.s2[:j1, j0:j1] += prod[:j1, j0:j1]
        else:
            t = y @ self._omega_t
            self.z += y.T @ t
            if self.sums:
                self.sqnorm += float(np.einsum("fd,fd->f", y, y).sum(dtype=np.float64))
        if self.sums:
            cs = _column_sums(y)
            if not np.all(np.isfinite(cs)):
                raise AnalysisError(f"non-finite positions (NaN or inf) in frames {self.n}-{self.n + m - 1} of the "
                                    "PCA window (counted from its first frame)")
            self.s1 += cs
        self.n += m


# Below this many elements a BLAS call is too small to be worth threads, and the first use of the
# thread limiter costs ~40 ms (threadpoolctl scans the loaded libraries): small PCAs skip it.
_FEW_THREADS_MIN = 1 << 20


def _few_threads(n_elements: int) -> Any:
    """One BLAS thread for skinny or thin-matrix work of this size (``correlation.one_blas_thread``)."""
    import contextlib

    if n_elements < _FEW_THREADS_MIN:
        return contextlib.nullcontext()
    from phasewake.core.analyses.correlation import one_blas_thread

    return one_blas_thread()


def _column_sums(y: np.ndarray) -> np.ndarray:
    """sum(y, axis=0) in float64 from float32 partial sums over 64 rows (rounding ~64 eps of the terms at
    most, below that of the block's float32 products; 4x cheaper than converting every element)."""
    m, d = y.shape
    q = m // 64
    out = np.zeros(d)
    if q:
        out += y[:q * 64].reshape(q, 64, d).sum(axis=1).sum(axis=0, dtype=np.float64)
    if m > q * 64:
        out += y[q * 64:].sum(axis=0, dtype=np.float64)
    return out


def _finish_exact(acc: _Accumulator, k: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    n = acc.n
    # s2 holds the upper triangle and zeros below (syrk never writes the lower triangle of its zeroed
    # output): mirror it with one sum; every step keeps the matrix exactly symmetric (few d x d passes:
    # each costs ~30 ms at d = 3000)
    cov = acc.s2 + acc.s2.T
    cov[np.diag_indices_from(cov)] -= np.diag(acc.s2)
    mu = acc.s1 / n
    cov -= n * np.outer(mu, mu)
    cov /= n - 1
    evals, evecs = _leading_eigenpairs(cov, k)
    order = np.argsort(evals)[::-1]
    return np.clip(evals[order], 0.0, None), evecs[:, order], mu, float(np.trace(cov))


def _sketch_cq(acc: _Accumulator, n: int, mu: np.ndarray) -> np.ndarray:
    """C Omega from the pass's sketch sum y^T y Omega (centred with the mean of the first pass)."""
    return (acc.z - n * np.outer(mu, mu @ acc.omega)) / (n - 1)


class PCAReduction:
    """The PCA of an atom group as a chunk reduction: ``prepare``, ``update(chunk)``, ``finish()``.

    Settings are those of :func:`compute_pca` (keyword-only). One pass over the frames:

    * ``method="exact"``: sum(y) and y^T y of the fitted displacements; ``finish`` forms the covariance
      and its leading eigenpairs;
    * ``method="randomized"`` with ``n_iter=0``: the single-pass Nystrom sketch (Tropp et al. 2017).
      Subspace iteration (``n_iter`` > 0) needs ``n_iter + 1`` passes and is refused here: use
      :func:`compute_pca`.

    Reference: ``reference_nm`` if given, else the first frame of the pass (frame ``start`` of the window,
    taken from the first chunk, exactly what :func:`compute_pca` uses). No iterative mean-structure fit.

    ``finish()`` returns a :class:`PCAResult` without projections (they need the eigenvectors, so a second
    pass: :class:`PCAProjection`). Attributes ``atoms``, ``needs_positions``, ``needs_velocities`` follow
    the ``onepass.ChunkConsumer`` protocol.
    """

    needs_positions = True
    needs_velocities = False

    def __init__(
        self,
        run: Run,
        *,
        atom_indices: Sequence[int] | np.ndarray | None = None,
        stride: int = 1,
        chunk_frames: int | None = None,
        mass_weighted: bool = True,
        fit: bool = True,
        reference_nm: np.ndarray | None = None,
        n_components: int = 10,
        method: str = "exact",
        n_iter: int = 0,
        oversample: int = 30,
        seed: int = 0,
        precision: str = "float32",
        _allow_iterations: bool = False,
    ) -> None:
        if run.frames is None:
            raise MissingDataError("the run has no frames (positions)", path=_path(run))
        if method not in ("exact", "randomized"):
            raise AnalysisError(f"unknown PCA method {method!r}: use 'exact' or 'randomized'")
        if precision not in ("float32", "float64"):
            raise AnalysisError(f"unknown precision {precision!r}")
        if method == "randomized" and n_iter > 0 and not _allow_iterations:
            raise AnalysisError(f"the randomized PCA with n_iter={n_iter} reads the frames {n_iter + 1} times; "
                                "a one-pass consumer supports n_iter=0 (the Nystrom sketch) or the exact route")
        self.n_atoms, self.path = run.n_atoms, _path(run)
        self.velocities_estimated = bool(getattr(run.frames, "velocities_estimated", False))
        self.idx, self.masses = _group_and_masses(run, atom_indices)
        g = self.idx.size
        self.d = 3 * g
        if method == "exact":
            from phasewake.core.resources import require_memory

            # the float64 covariance, its eigen-decomposition workspace and a copy: about 3 d^2 doubles
            require_memory(3.0 * 8.0 * self.d * self.d, what=f"an exact PCA of {self.d} coordinates ({g} atoms)",
                           hint="choose fewer atoms (e.g. pc(1, \"name CA\")) or the randomized route",
                           path=_path(run))
        self.k = int(min(max(1, n_components), self.d))
        self.block = int(chunk_frames or default_block_frames(self.d, 4 if precision == "float32" else 8))
        self.stride = int(stride)
        self.mass_weighted, self.fit, self.method = bool(mass_weighted), bool(fit), method
        self.n_iter, self.oversample, self.seed, self.precision = int(n_iter), int(oversample), int(seed), precision
        self.dt: type = np.float32 if precision == "float32" else np.float64
        self.sq = np.sqrt(self.masses) if self.mass_weighted else np.ones(g)
        self.fit_w = self.masses if self.mass_weighted else np.ones(g)
        if reference_nm is not None:
            ref = np.asarray(reference_nm, dtype=np.float64)
            if ref.shape != (g, 3):
                raise AnalysisError(f"the PCA reference has shape {ref.shape}, expected ({g}, 3)")
            self.reference: np.ndarray | None = ref
        else:
            self.reference = None
        self.atoms = _group_columns(self.idx, run.n_atoms)
        self._local: np.ndarray | None = None
        self.acc: _Accumulator | None = None
        self.fitter: Any = None
        self.omega0: np.ndarray | None = None
        if method == "randomized":
            rng = np.random.default_rng(self.seed)
            ell = int(min(self.d, self.k + max(0, self.oversample)))
            with _few_threads(self.d * ell):  # a thin QR: threads only synchronise (0.5 s instead of 5 ms at load 3)
                self.omega0, _ = np.linalg.qr(rng.standard_normal((self.d, ell)))  # atom-major rows
        self._range = (0, run.n_frames)

    def prepare(self, columns: np.ndarray | None, *, start: int, stop: int, chunk_frames: int) -> None:
        self._local = _local_positions(columns, self.idx, self.n_atoms)
        self._range = (int(start), int(stop))

    def group_positions(self, chunk: FrameChunk) -> np.ndarray:
        """The group's positions (m, g, 3) from a chunk of the pass."""
        pos = np.asarray(chunk.positions_nm)
        return pos if self._local is None else np.take(pos, self._local, axis=1)

    def _start(self, x: np.ndarray) -> None:
        from phasewake.core.analyses.superpose import FrameFitter

        if self.reference is None:
            self.reference = np.asarray(x[0], dtype=np.float64)  # the first frame of the window
        if not np.all(np.isfinite(self.reference)):
            raise AnalysisError("the PCA reference (default: the first frame of the window) has non-finite "
                                "positions", path=self.path)
        self.fitter = FrameFitter(self.reference, self.fit_w, scale=self.sq, dtype=self.dt, fit=self.fit)
        omega = None if self.omega0 is None else self.omega0[self.fitter.order]
        self.acc = _Accumulator(self.fitter, block=self.block, mode=self.method, omega=omega)

    def update(self, chunk: FrameChunk) -> None:
        x = self.group_positions(chunk)
        if x.shape[0] == 0:
            return
        if self.acc is None:
            self._start(x)
        assert self.acc is not None
        self.acc.update(x)

    def use_first_frame_of(self, run: Run, start: int) -> None:
        """Take frame ``start`` as the reference now (what a serial pass from ``start`` takes from its first
        chunk), so consumers fed parts of the frames share it and can be merged."""
        if self.reference is None:
            chunk = run.frames.read_frame(int(start)) if run.frames is not None else None
            if chunk is None:
                raise MissingDataError("the run has no frames (positions)", path=self.path)
            self.reference = np.asarray(chunk.positions_nm[0][self.idx], dtype=np.float64)

    def merge(self, later: PCAReduction) -> None:
        """Fold in the sums of the frames right after these (see the class docstring)."""
        from phasewake.core.model.framepass import check_next

        check_next(self._range, later._range, "PCA")
        if later.acc is None:
            self._range = (self._range[0], later._range[1])
            return
        if self.acc is None:  # this part saw no frames: the later one's state is the whole
            self.acc, self.fitter, self.reference = later.acc, later.fitter, later.reference
            self._range = (self._range[0], later._range[1])
            return
        same = self.reference is not None and later.reference is not None and np.array_equal(self.reference,
                                                                                             later.reference)
        if not same or later.method != self.method:
            raise AnalysisError("PCA: parts of one PCA need one reference and method: give reference_nm, or "
                                "call use_first_frame_of(run, start) on the consumer before the parts are fed")
        self.acc.merge(later.acc)
        self._range = (self._range[0], later._range[1])

    def finish(self) -> PCAResult:
        acc = self.acc
        if acc is None or (acc.n + acc.fill) < 2:
            raise TooShortError("a PCA", have=0 if acc is None else acc.n + acc.fill, need=2)
        acc.flush()
        if self.method == "exact":
            evals, evecs, mu, total = _finish_exact(acc, self.k)
        else:
            n = acc.n
            mu = acc.s1 / n
            with _few_threads(acc.z.size):  # thin QR/SVD/Cholesky of d x l matrices
                evals, evecs = _nystrom(acc.omega, _sketch_cq(acc, n, mu), self.k, float(np.finfo(self.dt).eps))
            total = (acc.sqnorm - n * float(mu @ mu)) / (n - 1)
        return self._result(evals, evecs, mu, total, acc.n)

    def _result(self, evals: np.ndarray, evecs: np.ndarray, mu: np.ndarray, total: float, n: int) -> PCAResult:
        """Back to atom-major order, fixed signs, units and settings."""
        assert self.reference is not None
        order = self.fitter.order
        vec = np.empty_like(evecs)
        vec[order] = evecs
        mean = np.empty(self.d)
        mean[order] = mu + self.fitter.shift
        # a fixed sign per eigenvector (largest component positive) so results are reproducible
        signs = np.sign(vec[np.argmax(np.abs(vec), axis=0), np.arange(vec.shape[1])])
        signs[signs == 0] = 1.0
        vec = vec * signs
        mw = self.mass_weighted
        start, stop = self._range
        return PCAResult(
            atom_indices=self.idx, masses_amu=self.masses, reference_nm=self.reference, mean=mean,
            eigenvalues=evals, eigenvectors=vec, total_variance=float(total),
            explained_variance_ratio=evals / total if total > 0 else np.full(evals.shape[0], np.nan),
            n_frames=int(n), eigenvalue_unit="amu nm^2" if mw else "nm^2",
            projection_unit="nm amu^1/2" if mw else "nm",
            momentum_unit="nm amu^1/2/ps" if mw else "nm/ps (velocity projected on unit vector)",
            velocities_estimated=self.velocities_estimated,
            mass_weighted=mw, fit=self.fit, method=self.method, n_components=self.k, start=start, stop=stop,
            stride=self.stride, chunk_frames=self.block, n_iter=self.n_iter if self.method == "randomized" else 0,
            oversample=self.oversample if self.method == "randomized" else 0, seed=self.seed,
            precision=self.precision,
        )


class PCAProjection:
    """Projections q_k(t), mode momenta p_k(t) and cosine contents of a computed PCA: the second pass.

    Frames are fitted in float64 (as :func:`pc_value_and_gradient`), q = e_k . (y - <y>); velocities are
    rotated with the frame's fit and projected, p_k = e_k . M^1/2 v. ``finish()`` returns the
    :class:`PCAResult` with ``projections``, ``momenta``, ``time_ps`` and ``cosine_content`` filled in.
    """

    needs_positions = True

    def __init__(self, run: Run, pca: PCAResult) -> None:
        from phasewake.core.analyses.superpose import FrameFitter

        if run.frames is None:
            raise MissingDataError("the run has no frames (positions)", path=_path(run))
        self.pca, self.n_atoms = pca, run.n_atoms
        self.idx = np.asarray(pca.atom_indices, dtype=np.int64)
        self.atoms = _group_columns(self.idx, run.n_atoms)
        self.needs_velocities = bool(run.frames.has_velocities)
        g = self.idx.size
        self.sq = np.sqrt(pca.masses_amu) if pca.mass_weighted else np.ones(g)
        fit_w = pca.masses_amu if pca.mass_weighted else np.ones(g)
        self.fitter = FrameFitter(pca.reference_nm, fit_w, scale=self.sq, dtype=np.float64, fit=pca.fit)
        order = self.fitter.order
        self.e_fit = np.ascontiguousarray(pca.eigenvectors[order])
        self.offset = (self.fitter.shift - pca.mean[order]) @ self.e_fit  # (k,)
        self._local: np.ndarray | None = None
        self._q: list[np.ndarray] = []
        self._p: list[np.ndarray] = []
        self._t: list[np.ndarray] = []
        self._got_v = self.needs_velocities
        self._y = np.zeros((0, 3 * g))
        self._range = (0, run.n_frames)

    def prepare(self, columns: np.ndarray | None, *, start: int, stop: int, chunk_frames: int) -> None:
        self._local = _local_positions(columns, self.idx, self.n_atoms)
        self._range = (int(start), int(stop))

    def update(self, chunk: FrameChunk) -> None:
        pos = np.asarray(chunk.positions_nm)
        x = pos if self._local is None else np.take(pos, self._local, axis=1)
        m = x.shape[0]
        if self._y.shape[0] < m:
            self._y = np.empty((m, self.fitter.d))
        y = self._y[:m]
        rot = self.fitter.displacements(x, y)
        self._q.append(y @ self.e_fit + self.offset)
        self._t.append(np.asarray(chunk.time_ps, dtype=np.float64))
        if self._got_v:
            vel = chunk.velocities_nm_per_ps
            if vel is None:
                self._got_v = False
                return
            v = np.asarray(vel, dtype=np.float64)
            if self._local is not None:
                v = np.take(v, self._local, axis=1)
            if rot is not None:
                v = np.matmul(v, rot)
            self._p.append((v * self.sq[None, :, None]).reshape(m, -1) @ self.pca.eigenvectors)

    def merge(self, later: PCAProjection) -> None:
        """Append the projections of the frames right after these (per frame: exact)."""
        from phasewake.core.model.framepass import check_next

        check_next(self._range, later._range, "PCA projections")
        self._q += later._q
        self._p += later._p
        self._t += later._t
        self._got_v = self._got_v and later._got_v
        self._range = (self._range[0], later._range[1])

    def finish(self) -> PCAResult:
        from dataclasses import replace

        k = self.pca.eigenvalues.shape[0]
        proj = np.concatenate(self._q) if self._q else np.zeros((0, k))
        mom = np.concatenate(self._p) if (self._got_v and self._p) else None
        cc = np.array([cosine_content(proj[:, j], j + 1) for j in range(k)])
        return replace(self.pca, projections=proj, momenta=mom, time_ps=np.concatenate(self._t) if self._t
                       else np.zeros(0), cosine_content=cc)


def compute_pca(
    run: Run,
    *,
    atom_indices: Sequence[int] | np.ndarray | None = None,
    start: int = 0,
    stop: int | None = None,
    stride: int = 1,
    chunk_frames: int | None = None,
    mass_weighted: bool = True,
    fit: bool = True,
    reference_nm: np.ndarray | None = None,
    n_components: int = 10,
    method: str = "exact",
    n_iter: int = 0,
    oversample: int = 30,
    seed: int = 0,
    precision: str = "float32",
    projections: bool = True,
) -> Work[PCAResult]:
    """PCA of an atom group of a run, streamed over chunks. A generator returning :class:`PCAResult`.

    The passes are :class:`PCAReduction` (covariance or sketch), ``n_iter`` more sketch passes for the
    randomized subspace iteration, and :class:`PCAProjection` when ``projections``; each reads the frames
    once through ``onepass.feed`` (the same loop as ``onepass.run_pass``).

    Parameters
    ----------
    atom_indices : atoms to use; default: the non-solvent atoms (:func:`coordinates.solute_atoms`)
    mass_weighted : use y = M^1/2 x (unit-mass modes; eigenvalues in amu nm^2)
    fit : superpose every frame on ``reference_nm`` (default: the first frame of the range) first.
        Switch it off for a system without overall rotation (e.g. independent oscillators).
    n_components : number of leading components kept (all eigenvalues are used for the ratio)
    method : "exact" (full covariance, eigh) or "randomized" (Halko et al. 2011)
    n_iter, oversample, seed : randomized route only. ``n_iter`` extra passes of subspace iteration
        (default 0: one pass over the data with the Nystrom approximation of Tropp et al. 2017, the
        fastest; each extra pass costs another read and gains accuracy: on a synthetic spectrum the
        leading eigenvalues were within ~2% after one pass, 3e-4 after two, 1e-7 after five);
        ``oversample`` extra sketch columns (default 30); ``seed`` of the random sketch.
    chunk_frames : frames per block of the products (default :func:`default_block_frames`: 2048 frames,
        fewer for big groups, at most 32 MB per block); results depend on it (float32 rounding), not on
        the reader's chunking
    precision : "float32" (fit and products in float32, 3 x 3 algebra and accumulation in float64) or
        "float64"
    projections : also make a second pass for q_k(t), p_k(t) and the cosine content (fitted in float64)
    """
    from phasewake.core.model.framepass import feed

    if run.frames is None:
        raise MissingDataError("the run has no frames (positions)", path=_path(run))
    stop_ = run.n_frames if stop is None else min(int(stop), run.n_frames)
    n_sel = len(range(start, stop_, stride))
    if method not in ("exact", "randomized"):
        raise AnalysisError(f"unknown PCA method {method!r}: use 'exact' or 'randomized'")
    if n_sel < 2:
        raise TooShortError("a PCA", have=n_sel, need=2)
    red = PCAReduction(run, atom_indices=atom_indices, stride=stride, chunk_frames=chunk_frames,
                       mass_weighted=mass_weighted, fit=fit, reference_nm=reference_nm, n_components=n_components,
                       method=method, n_iter=n_iter, oversample=oversample, seed=seed, precision=precision,
                       _allow_iterations=True)
    n_extra = n_iter if method == "randomized" else 0
    total_work = float((1 + n_extra + (1 if projections else 0)) * n_sel)
    read = {"start": start, "stop": stop_, "stride": stride, "chunk_frames": red.block}
    label = "PCA covariance" if method == "exact" else f"PCA randomized pass 1/{n_extra + 1}"
    for done in feed(run, {"pca": red}, **read):
        yield Progress(done, total_work, label)
    if n_extra == 0:
        res = red.finish()
    else:
        # randomized subspace iteration (Halko et al. 2011, Alg. 4.4), Rayleigh-Ritz at the end (Alg. 5.3)
        acc = red.acc
        assert acc is not None
        acc.flush()
        n = acc.n
        mu = acc.s1 / n
        total = (acc.sqnorm - n * float(mu @ mu)) / (n - 1)
        z = _sketch_cq(acc, n, mu)
        q_block = acc.omega
        for it in range(n_extra):
            with _few_threads(z.size):
                q_block, _ = np.linalg.qr(z)
            sketch = _Accumulator(red.fitter, block=red.block, mode="randomized", omega=q_block, sums=False)
            stage = _Stage(red, sketch)
            for done in feed(run, {"pca": stage}, **read):
                yield Progress((it + 1) * n_sel + done, total_work, f"PCA randomized pass {it + 2}/{n_extra + 1}")
            sketch.flush()
            z = _sketch_cq(sketch, n, mu)
        b = q_block.T @ z
        b = 0.5 * (b + b.T)
        w, v = np.linalg.eigh(b)
        order = np.argsort(w)[::-1]
        evals = np.clip(w[order][:red.k], 0.0, None)
        evecs = (q_block @ v[:, order])[:, :red.k]
        res = red._result(evals, evecs, mu, total, n)
    if projections:
        proj = PCAProjection(run, res)
        offset = (1 + n_extra) * n_sel
        for done in feed(run, {"pca": proj}, **{**read, "chunk_frames": red.block}):
            yield Progress(offset + done, total_work, "PCA projections")
        res = proj.finish()
    return res


class _Stage:
    """One more sketch pass of the subspace iteration, fed like a consumer (same group, same fitter)."""

    needs_positions = True
    needs_velocities = False

    def __init__(self, red: PCAReduction, acc: _Accumulator) -> None:
        self.red, self.acc, self.atoms = red, acc, red.atoms

    def prepare(self, columns: np.ndarray | None, *, start: int, stop: int, chunk_frames: int) -> None:
        self.red.prepare(columns, start=start, stop=stop, chunk_frames=chunk_frames)

    def update(self, chunk: FrameChunk) -> None:
        x = self.red.group_positions(chunk)
        if x.shape[0]:
            self.acc.update(x)

    def finish(self) -> None:
        self.acc.flush()


class PCAConsumer(PCAReduction):
    """The PCA covariance (exact route) or the one-pass Nystrom sketch (randomized, ``n_iter=0``), as a
    consumer of a shared frame pass.

    Settings are those of :func:`compute_pca` except ``start``, ``stop`` (the pass's) and ``projections``;
    ``finish()`` returns the :class:`PCAResult` that ``compute_pca(run, ..., start=, stop=, projections=False)``
    returns, to float rounding identical (the same reduction: blocks of ``chunk_frames`` frames whatever the
    pass's chunks; reference: the first frame of the pass unless ``reference_nm``). Subspace iteration
    (``n_iter`` > 0) needs more passes and is refused; projections need the eigenvectors, so a later pass
    with :class:`PCAProjectionConsumer`.
    """

    def __init__(self, run: Run, *, projections: bool = False, **settings: Any) -> None:
        if projections:
            raise AnalysisError("PCA projections need the eigenvectors first: add a PCAProjectionConsumer to a "
                                "second pass, or call projection.compute_pca")
        if "stride" in settings and int(settings["stride"]) != 1:
            raise AnalysisError("a frame pass reads every frame: stride must be 1 (use compute_pca for a stride)")
        for key in ("start", "stop"):
            if key in settings:
                raise AnalysisError(f"{key} is the pass's setting (FramePass / run_pass), not the PCA's")
        super().__init__(run, **settings)


class PCAProjectionConsumer(PCAProjection):
    """q_k(t), p_k(t) and cosine contents of a computed PCA (``compute_pca``'s projection pass)."""


def pca_arrays(
    positions_nm: np.ndarray,
    masses_amu: np.ndarray,
    *,
    velocities_nm_per_ps: np.ndarray | None = None,
    time_ps: np.ndarray | None = None,
    atom_indices: Sequence[int] | np.ndarray | None = None,
    chunk_frames: int | None = None,
    mass_weighted: bool = True,
    fit: bool = True,
    reference_nm: np.ndarray | None = None,
    n_components: int = 10,
    method: str = "exact",
    n_iter: int = 0,
    oversample: int = 30,
    seed: int = 0,
    precision: str = "float32",
    projections: bool = True,
) -> PCAResult:
    """PCA of in-memory arrays: the same implementation as :func:`compute_pca` (same settings).

    positions_nm, velocities_nm_per_ps : (n_frames, n_atoms, 3); masses_amu : (n_atoms,);
    time_ps : (n_frames,) (default 0, 1, 2, ...).
    """
    from phasewake.core.progress import result_of
    from phasewake.core.readers.memory import run_from_arrays

    pos = np.asarray(positions_nm)
    t = np.arange(pos.shape[0], dtype=np.float64) if time_ps is None else np.asarray(time_ps)
    run = run_from_arrays(pos, t, masses_amu, velocities_nm_per_ps=velocities_nm_per_ps)
    return result_of(compute_pca(
        run, atom_indices=atom_indices, chunk_frames=chunk_frames, mass_weighted=mass_weighted, fit=fit,
        reference_nm=reference_nm, n_components=n_components, method=method, n_iter=n_iter,
        oversample=oversample, seed=seed, precision=precision, projections=projections,
    ))


def cosine_content_verdict(pca: PCAResult, *, component: int = 1) -> Verdict:
    """Verdict on the cosine content of a leading component (Hess 2002). A heuristic."""
    if pca.cosine_content is None:
        raise AnalysisError("the PCA was computed without projections, so it has no cosine content")
    k = int(component)
    if not 1 <= k <= pca.cosine_content.shape[0]:
        raise AnalysisError(f"component {k} is not among the {pca.cosine_content.shape[0]} computed")
    c = float(pca.cosine_content[k - 1])
    return judge(
        "pca.cosine_content", c, title=f"Cosine content of PC{k}", unit="",
        message=f"PC{k} has cosine content {c:.2f} (1 = a perfect half-cosine{'s' if k > 1 else ''} with {k} "
                "half period(s) over the run, as random diffusion gives; near 0 = no such shape). "
                + HEURISTIC_NOTE,
        advice="A high value means the run has not sampled an equilibrium distribution along this component: "
               "run longer, or do not read free energies along it.",
        details={"component": k, "method": pca.method, "n_frames": pca.n_frames},
    )
