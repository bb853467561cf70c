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

Frame consumers (``core/model/framepass.py``): :class:`PCAReduction` accumulates, :class:`PCAProjection`
projects (it needs the eigenvectors: a second pass); :func:`compute_pca` feeds them, and :class:`PCAConsumer`
in a shared pass gives bitwise what ``compute_pca(..., projections=False)`` gives (exact route or the
single-pass sketch, ``n_iter=0``). The block sums live in :mod:`~phasewake.core.analyses.pca_kernels`.

Reference structure: ``reference_nm`` if given, else the first frame of the window (taken from the first
chunk of the pass, so no extra read). There is no iterative mean-structure refit; fitting onto the mean
would need a second pass (fit, average, refit), which a user can do by passing the ``mean`` of a first
PCA (reshaped to (g, 3), divided by sqrt(mass)) as ``reference_nm``.

Fitting (``core/superpose.py``): per block, centres and correlation matrices by BLAS products, rotations
by the quaternion method (Horn 1987; Theobald 2005) in float64, the fitted block in float32 in a
component-major layout (x0 x1 ... y0 ... z0 ...; eigenvectors and means are returned atom-major). Blocks
of ``block_frames`` frames are gathered across the reader's chunks, so the result does not depend on
how a reader cuts the frames. The projection pass fits in float64 (as :func:`pc_value_and_gradient`).

Memory is bounded by the block size and d x d (exact) or d x l (randomized), never the file.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np

from phasewake.core.analyses.atom_groups import solute_atoms
from phasewake.core.analyses.geometry import pc_value_and_gradient  # noqa: F401 - re-exported
from phasewake.core.analyses.pca_kernels import (  # noqa: F401 - PCAResult and the kernels' public names live here too
    C_CM_PER_PS,
    PCA_BLOCK_BYTES,
    PCA_CHUNK_FRAMES,
    Accumulator,
    PCAResult,
    cosine_content,
    default_block_frames,
    few_threads,
    finish_exact,
    nystrom,
    quasi_harmonic_frequencies,
    sketch_cq,
)
from phasewake.core.analyses.request import AnalysisRequest, index_tuple
from phasewake.core.analyses.verdicts import HEURISTIC_NOTE, Explanation, Threshold, Verdict, judge, register
from phasewake.core.errors import AnalysisError, MissingDataError, TooShortError
from phasewake.core.model.run import FrameChunk
from phasewake.core.progress import Progress, Work

if TYPE_CHECKING:
    from phasewake.core.model.run import Run

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
    the ``feeding.FrameConsumer`` protocol.
    """

    needs_positions = True
    needs_velocities = False

    def __init__(
        self,
        run: Run,
        *,
        atom_indices: Sequence[int] | np.ndarray | None = None,
        stride: int = 1,
        block_frames: int | None = None,
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
        self.block = int(block_frames or default_block_frames(self.d, 4 if precision == "float32" else 8))
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
        self.acc: Accumulator | None = None
        self.fitter: Any = None
        self.omega0: np.ndarray | None = None
        if method == "randomized":
            rng = np.random.default_rng(self.seed)
            ell = int(min(self.d, self.k + max(0, self.oversample)))
            with few_threads(self.d * ell):  # a thin QR: threads only synchronise (0.5 s instead of 5 ms at load 3)
                self.omega0, _ = np.linalg.qr(rng.standard_normal((self.d, ell)))  # atom-major rows
        self._range = (0, run.n_frames)

    def prepare(self, columns: np.ndarray | None, *, start: int, stop: int, chunk_frames: int) -> None:
        self._local = _local_positions(columns, self.idx, self.n_atoms)
        self._range = (int(start), int(stop))

    @property
    def state_bytes(self) -> int:  # sent back by a worker: the exact route's d x d sums, else the d x l sketch
        return 8 * self.d * (1 + (self.d if self.omega0 is None else self.omega0.shape[1]))

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
        self.acc = Accumulator(self.fitter, block=self.block, mode=self.method, omega=omega)

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
        from phasewake.core.model.feeding import check_next

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
            evals, evecs, mu, total = finish_exact(acc, self.k)
        else:
            n = acc.n
            mu = acc.s1 / n
            with few_threads(acc.z.size):  # thin QR/SVD/Cholesky of d x l matrices
                evals, evecs = nystrom(acc.omega, sketch_cq(acc, n, mu), self.k, float(np.finfo(self.dt).eps))
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
            stride=self.stride, block_frames=self.block, n_iter=self.n_iter if self.method == "randomized" else 0,
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
        from phasewake.core.model.feeding import check_next

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
    block_frames: int | None = None,
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
    once through ``feeding.feed`` (the loop of ``framepass.run_pass``).

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
    block_frames : frames per block of the products (default :func:`default_block_frames`: 2048 frames,
        fewer for big groups, at most 32 MB per block); results depend on it (float32 rounding), not on
        the reader's chunking (the covariance pass reads in chunks of one block, within the chunk budget)
    precision : "float32" (fit and products in float32, 3 x 3 algebra and accumulation in float64) or
        "float64"
    projections : also make a second pass for q_k(t), p_k(t) and the cosine content (fitted in float64)
    """
    from phasewake.core.model.feeding import feed

    if run.frames is None:
        raise MissingDataError("the run has no frames (positions)", path=_path(run))
    stop_ = run.n_frames if stop is None else min(int(stop), run.n_frames)
    n_sel = len(range(start, stop_, stride))
    if method not in ("exact", "randomized"):
        raise AnalysisError(f"unknown PCA method {method!r}: use 'exact' or 'randomized'")
    if n_sel < 2:
        raise TooShortError("a PCA", have=n_sel, need=2)
    red = PCAReduction(run, atom_indices=atom_indices, stride=stride, block_frames=block_frames,
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
        res = yield from _subspace_iteration(run, red, read, n_extra, n_sel, total_work)
    if projections:
        proj = PCAProjection(run, res)
        offset = (1 + n_extra) * n_sel
        for done in feed(run, {"pca": proj}, **read):
            yield Progress(offset + done, total_work, "PCA projections")
        res = proj.finish()
    return res


def _subspace_iteration(run: Run, red: PCAReduction, read: dict[str, Any], n_extra: int, n_sel: int,
                        total_work: float) -> Work[PCAResult]:
    """``n_extra`` more sketch passes after the first (Halko et al. 2011, Alg. 4.4), Rayleigh-Ritz at the end
    (Alg. 5.3)."""
    from phasewake.core.model.feeding import feed

    acc = red.acc
    assert acc is not None
    acc.flush()
    n = acc.n
    mu = acc.s1 / n
    total = (acc.sqnorm - n * float(mu @ mu)) / (n - 1)
    z = sketch_cq(acc, n, mu)
    q_block = acc.omega
    for it in range(n_extra):
        with few_threads(z.size):
            q_block, _ = np.linalg.qr(z)
        sketch = Accumulator(red.fitter, block=red.block, mode="randomized", omega=q_block, sums=False)
        for done in feed(run, {"pca": _Stage(red, sketch)}, **read):
            yield Progress((it + 1) * n_sel + done, total_work, f"PCA randomized pass {it + 2}/{n_extra + 1}")
        sketch.flush()
        z = sketch_cq(sketch, n, mu)
    b = q_block.T @ z
    b = 0.5 * (b + b.T)
    w, v = np.linalg.eigh(b)
    order = np.argsort(w)[::-1]
    evals = np.clip(w[order][:red.k], 0.0, None)
    evecs = (q_block @ v[:, order])[:, :red.k]
    return red._result(evals, evecs, mu, total, n)


class _Stage:
    """One more sketch pass of the subspace iteration, fed like a consumer (same group, same fitter)."""

    needs_positions = True
    needs_velocities = False

    def __init__(self, red: PCAReduction, acc: Accumulator) -> None:
        self.red, self.acc, self.atoms = red, acc, red.atoms

    def prepare(self, columns: np.ndarray | None, *, start: int, stop: int, chunk_frames: int) -> None:
        self.red.prepare(columns, start=start, stop=stop, chunk_frames=chunk_frames)

    def update(self, chunk: FrameChunk) -> None:
        x = self.red.group_positions(chunk)
        if x.shape[0]:
            self.acc.update(x)

    def merge(self, later: _Stage) -> None:
        self.acc.merge(later.acc)

    def finish(self) -> None:
        self.acc.flush()


class PCAConsumer(PCAReduction):
    """The PCA covariance (exact route) or the one-pass Nystrom sketch (randomized, ``n_iter=0``), as a
    consumer of a shared frame pass.

    Settings are those of :func:`compute_pca` except ``start``, ``stop`` (the pass's) and ``projections``;
    ``finish()`` returns the :class:`PCAResult` that ``compute_pca(run, ..., start=, stop=, projections=False)``
    returns, to float rounding identical (the same reduction: blocks of ``block_frames`` frames whatever the
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
    block_frames: int | None = None,
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
        run, atom_indices=atom_indices, block_frames=block_frames, mass_weighted=mass_weighted, fit=fit,
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


@dataclass(frozen=True)
class PCARequest(AnalysisRequest):
    """A PCA with every setting a user can give (those of :func:`compute_pca`); defaults decided here.

    ``atom_indices`` and ``reference_nm`` are kept as tuples so equal requests compare equal.

    Examples
    --------
    >>> from phasewake.core.analyses.projection import PCARequest
    >>> PCARequest(atom_indices=[4, 5, 6], n_components=2).atom_indices
    (4, 5, 6)
    """

    name: ClassVar[str] = "pca"
    label: ClassVar[str] = "principal components"

    atom_indices: Sequence[int] | None = field(default=None, hash=False)
    start: int = 0
    stop: int | None = None
    stride: int = 1
    block_frames: int | None = None
    mass_weighted: bool = True
    fit: bool = True
    reference_nm: Any = field(default=None, hash=False)
    n_components: int = 10
    method: str = "exact"
    n_iter: int = 0
    oversample: int = 30
    seed: int = 0
    precision: str = "float32"
    projections: bool = True

    def __post_init__(self) -> None:
        object.__setattr__(self, "atom_indices", index_tuple(self.atom_indices))
        if self.reference_nm is not None:
            ref = np.asarray(self.reference_nm, dtype=np.float64)
            object.__setattr__(self, "reference_nm", tuple(tuple(float(v) for v in row) for row in ref.reshape(-1, 3)))

    def _keywords(self) -> dict[str, Any]:
        kw = dict(self.settings())
        if kw["reference_nm"] is not None:
            kw["reference_nm"] = np.asarray(kw["reference_nm"], dtype=np.float64)
        return kw

    def work(self, run: Run) -> Work[PCAResult]:
        return (yield from compute_pca(run, **self._keywords()))

    def consumer(self, run: Run) -> PCAConsumer | None:
        """The covariance (or one-pass sketch) of every frame in a shared pass; None for part of the frames, a
        stride, or subspace iteration (several passes)."""
        whole = self.start == 0 and self.stride == 1 and (self.stop is None or self.stop >= run.n_frames)
        if not whole or (self.method == "randomized" and self.n_iter > 0):
            return None
        kw = self._keywords()
        for key in ("start", "stop", "stride", "projections"):
            kw.pop(key)
        made = PCAConsumer(run, **kw)
        made.use_first_frame_of(run, 0)  # parts of a split pass share the serial pass's reference
        return made

    def after_pass(self, run: Run, finished: PCAResult) -> Work[PCAResult]:
        """The projection pass when ``projections`` (it needs the eigenvectors)."""
        from phasewake.core.model.framepass import run_one

        if not self.projections:
            return finished
        return (yield from run_one(run, PCAProjectionConsumer(run, finished), label="PCA projections"))
