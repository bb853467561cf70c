"""The PCA's result, array kernels, block reductions and eigen-solvers (:mod:`phasewake.core.analyses.projection`
builds on them and re-exports the public names).

:class:`Accumulator` gathers frames into blocks, fits each block (``superpose.FrameFitter``) and adds
y^T y (exact route) or the sketch y^T y Omega (randomized route), sum(y) and sum |y|^2 in float64;
:func:`finish_exact`, :func:`nystrom` and :func:`sketch_cq` turn the sums into eigenpairs (papers in
the docstring of :mod:`~phasewake.core.analyses.projection`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from phasewake.core.analyses.result import ResultMixin
from phasewake.core.errors import AnalysisError
from phasewake.core.units import KB_KJ_PER_MOL_K

C_CM_PER_PS = 2.99792458e-2  # speed of light (exact), cm/ps
# Frames per block of the PCA's products: the d x d accumulation is paid once per block, so blocks are
# longer than the reader's chunks; at most PCA_CHUNK_FRAMES frames and PCA_BLOCK_BYTES per block buffer.
PCA_CHUNK_FRAMES = 2048
PCA_BLOCK_BYTES = 32 * 2**20


def default_block_frames(n_coordinates: int, itemsize: int = 4) -> int:
    """Frames per PCA block when ``block_frames`` is not given: min(PCA_CHUNK_FRAMES, PCA_BLOCK_BYTES / row)."""
    return int(max(16, min(PCA_CHUNK_FRAMES, PCA_BLOCK_BYTES // max(1, n_coordinates * itemsize))))


@dataclass(frozen=True)
class PCAResult(ResultMixin):
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
    block_frames: int = 256  # frames per block of the products
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


def leading_eigenpairs(cov: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
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


def nystrom(omega: np.ndarray, y: np.ndarray, k: int, eps: float) -> tuple[np.ndarray, np.ndarray]:
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



class Accumulator:
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

    def merge(self, later: Accumulator) -> None:
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
            with few_threads(y.size):
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
            cs = column_sums(y)
            if not np.all(np.isfinite(cs)):
                raise AnalysisError(f"non-finite positions (NaN or inf) in frames {self.n}-{self.n + m - 1} of the "
                                    "PCA window (counted from its first frame)")
            self.s1 += cs
        self.n += m


# Below this many elements a BLAS call is too small to be worth threads, and the first use of the
# thread limiter costs ~40 ms (threadpoolctl scans the loaded libraries): small PCAs skip it.
FEW_THREADS_MIN = 1 << 20


def few_threads(n_elements: int) -> Any:
    """One BLAS thread for skinny or thin-matrix work of this size (``correlation.one_blas_thread``)."""
    import contextlib

    if n_elements < FEW_THREADS_MIN:
        return contextlib.nullcontext()
    from phasewake.core.analyses.correlation import one_blas_thread

    return one_blas_thread()


def column_sums(y: np.ndarray) -> np.ndarray:
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


def finish_exact(acc: Accumulator, k: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    n = acc.n
    # s2 holds the upper triangle and zeros below (syrk never writes the lower triangle of its zeroed
    # output): mirror it with one sum; every step keeps the matrix exactly symmetric (few d x d passes:
    # each costs ~30 ms at d = 3000)
    cov = acc.s2 + acc.s2.T
    cov[np.diag_indices_from(cov)] -= np.diag(acc.s2)
    mu = acc.s1 / n
    cov -= n * np.outer(mu, mu)
    cov /= n - 1
    evals, evecs = leading_eigenpairs(cov, k)
    order = np.argsort(evals)[::-1]
    return np.clip(evals[order], 0.0, None), evecs[:, order], mu, float(np.trace(cov))


def sketch_cq(acc: Accumulator, n: int, mu: np.ndarray) -> np.ndarray:
    """C Omega from the pass's sketch sum y^T y Omega (centred with the mean of the first pass)."""
    return (acc.z - n * np.outer(mu, mu @ acc.omega)) / (n - 1)


