"""Geometry of coordinates: the value of each coordinate kind and its analytic gradient, vectorised over
frames, with the minimum image of periodic boxes and optimal superposition (the kernels of
:mod:`phasewake.core.analyses.coordinates`, which re-exports them; the formulas are described there).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np

from phasewake.core.analyses.coordspec import ResolvedCoordinate
from phasewake.core.errors import AnalysisError, CoordinateSpecError

if TYPE_CHECKING:
    from phasewake.core.analyses.pca_kernels import PCAResult


def minimum_image(d: np.ndarray, box_nm: np.ndarray | None) -> np.ndarray:
    """Difference vectors through the minimum image.

    d : (n_frames, ..., 3) nm; box_nm : (n_frames, 3, 3) box edge vectors as rows, nm, or None.
    """
    if box_nm is None:
        return d
    box = np.asarray(box_nm, dtype=np.float64)
    diag = np.einsum("nii->ni", box)
    off = box - np.einsum("ni,ij->nij", diag, np.eye(3))
    shape = (box.shape[0],) + (1,) * (d.ndim - 2) + (3,)
    if not np.any(off):
        lengths = diag.reshape(shape)
        return d - lengths * np.round(d / lengths)
    inv = np.linalg.inv(box)
    extra = d.ndim - 2
    b = box.reshape((box.shape[0],) + (1,) * extra + (3, 3))
    ib = inv.reshape((inv.shape[0],) + (1,) * extra + (3, 3))
    s = np.einsum("...a,...ab->...b", d, ib)
    s -= np.round(s)
    r = np.einsum("...a,...ab->...b", s, b)
    # a skewed triclinic cell: the rounded image need not be the nearest; try the 27 neighbours
    shifts = np.array(np.meshgrid([-1, 0, 1], [-1, 0, 1], [-1, 0, 1], indexing="ij")).reshape(3, 27).T
    images = np.einsum("ka,...ab->...kb", shifts.astype(np.float64), b)  # (..., 27, 3)
    cand = r[..., None, :] + images
    best = np.argmin(np.einsum("...ka,...ka->...k", cand, cand), axis=-1)
    return np.take_along_axis(cand, best[..., None, None], axis=-2)[..., 0, :]


def _whole(x: np.ndarray, box_nm: np.ndarray | None) -> np.ndarray:
    """Make a group whole around its first atom. x : (n, g, 3)."""
    if box_nm is None:
        return x
    return x[:, :1] + minimum_image(x - x[:, :1], box_nm)


def kabsch(
    mobile: np.ndarray, reference: np.ndarray, weights: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Optimal superposition of each frame onto a reference (Kabsch, Acta Cryst. A 32, 922 (1976)).

    Parameters
    ----------
    mobile : (n_frames, g, 3) nm
    reference : (g, 3) nm
    weights : (g,), optional (e.g. masses); equal weights by default.

    Returns
    -------
    rotation : (n_frames, 3, 3) with row vectors rotated as ``(x - centre) @ rotation``
    centre : (n_frames, 3) weighted centre of each mobile frame
    reference_centre : (3,)
    """
    x = np.asarray(mobile, dtype=np.float64)
    y = np.asarray(reference, dtype=np.float64)
    w = np.ones(y.shape[0]) if weights is None else np.asarray(weights, dtype=np.float64)
    w = w / w.sum()
    cx = np.matmul(w, x)  # (n, 3): batched (g,) @ (n, g, 3)
    cy = w @ y
    h = np.matmul((x - cx[:, None, :]).transpose(0, 2, 1), (y - cy) * w[:, None])  # (n, 3, 3)
    u, _s, vt = np.linalg.svd(h)
    d = np.sign(np.linalg.det(u @ vt))
    d[d == 0] = 1.0
    u[:, :, 2] *= d[:, None]
    return u @ vt, cx, cy


def value_and_gradient(
    resolved: ResolvedCoordinate,
    positions_nm: np.ndarray,
    *,
    masses_amu: np.ndarray | None = None,
    box_nm: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Value of a coordinate and its gradient with respect to the atoms it depends on.

    Parameters
    ----------
    resolved : ResolvedCoordinate (its ``groups`` index ``positions_nm``)
    positions_nm : (n_frames, n_atoms, 3) nm
    masses_amu : (n_atoms,) amu, needed by com_distance, rg and pc
    box_nm : (n_frames, 3, 3) nm or None

    Returns
    -------
    values : (n_frames,)
    atoms : (n_used,) int, indices into the atom axis of ``positions_nm``
    gradient : (n_frames, n_used, 3), d q / d r_atom (unit of q per nm)
    """
    kernel = _KERNELS.get(resolved.function)
    if kernel is None:
        raise CoordinateSpecError(f"no kernel for {resolved.function}", spec=resolved.spec)
    return kernel(resolved, np.asarray(positions_nm), masses_amu, box_nm)


def _cartesian_kernel(resolved: ResolvedCoordinate, pos: np.ndarray, masses_amu: np.ndarray | None,
                      box_nm: np.ndarray | None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    g = resolved.groups
    i = int(g[0][0])
    axis = "xyz".index(resolved.function)
    grad = np.zeros((pos.shape[0], 1, 3))
    grad[:, 0, axis] = 1.0
    return pos[:, i, axis].astype(np.float64), np.array([i]), grad


def _distance_kernel(resolved: ResolvedCoordinate, pos: np.ndarray, masses_amu: np.ndarray | None,
                     box_nm: np.ndarray | None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    g = resolved.groups
    i, j = int(g[0][0]), int(g[1][0])
    d = minimum_image(pos[:, j].astype(np.float64) - pos[:, i], box_nm)
    r = np.sqrt(np.einsum("na,na->n", d, d))
    u = d / r[:, None]
    return r, np.array([i, j]), np.stack([-u, u], axis=1)


def _angle_kernel(resolved: ResolvedCoordinate, pos: np.ndarray, masses_amu: np.ndarray | None,
                  box_nm: np.ndarray | None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    g = resolved.groups
    i, j, k = (int(a[0]) for a in g)
    a = minimum_image(pos[:, i].astype(np.float64) - pos[:, j], box_nm)
    b = minimum_image(pos[:, k].astype(np.float64) - pos[:, j], box_nm)
    la = np.sqrt(np.einsum("na,na->n", a, a))
    lb = np.sqrt(np.einsum("na,na->n", b, b))
    ah, bh = a / la[:, None], b / lb[:, None]
    cos = np.clip(np.einsum("na,na->n", ah, bh), -1.0, 1.0)
    sin_vec = np.cross(ah, bh)
    sin = np.sqrt(np.einsum("na,na->n", sin_vec, sin_vec))
    theta = np.arctan2(sin, cos)
    with np.errstate(divide="ignore", invalid="ignore"):
        gi = -(bh - cos[:, None] * ah) / (la * sin)[:, None]
        gk = -(ah - cos[:, None] * bh) / (lb * sin)[:, None]
    return theta, np.array([i, j, k]), np.stack([gi, -(gi + gk), gk], axis=1)


def _dihedral_kernel(resolved: ResolvedCoordinate, pos: np.ndarray, masses_amu: np.ndarray | None,
                     box_nm: np.ndarray | None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    g = resolved.groups
    i, j, k, l = (int(a[0]) for a in g)
    p = pos.astype(np.float64)
    b1 = minimum_image(p[:, j] - p[:, i], box_nm)
    b2 = minimum_image(p[:, k] - p[:, j], box_nm)
    b3 = minimum_image(p[:, l] - p[:, k], box_nm)
    # value: the convention of mdtraj.compute_dihedrals (atan2 form)
    c1 = np.cross(b2, b3)
    c2 = np.cross(b1, b2)
    lb2 = np.sqrt(np.einsum("na,na->n", b2, b2))
    phi = np.arctan2(np.einsum("na,na->n", b1, c1) * lb2, np.einsum("na,na->n", c1, c2))
    # gradient: Blondel and Karplus, J. Comput. Chem. 17, 1132 (1996), with F = r_i - r_j,
    # G = r_j - r_k, H = r_l - r_k, A = F x G, B = H x G
    F, G, H = -b1, -b2, b3
    A = np.cross(F, G)
    B = np.cross(H, G)
    A2 = np.einsum("na,na->n", A, A)
    B2 = np.einsum("na,na->n", B, B)
    lg = lb2
    fg = np.einsum("na,na->n", F, G)
    hg = np.einsum("na,na->n", H, G)
    with np.errstate(divide="ignore", invalid="ignore"):
        ta = A * (lg / A2)[:, None]
        tb = B * (lg / B2)[:, None]
        ua = A * (fg / (A2 * lg))[:, None]
        ub = B * (hg / (B2 * lg))[:, None]
    gi = -ta
    gl = tb
    gj = ta + ua - ub
    gk = -tb - ua + ub
    grad = np.stack([gi, gj, gk, gl], axis=1)
    return phi, np.array([i, j, k, l]), grad


def _com_distance_kernel(resolved: ResolvedCoordinate, pos: np.ndarray, masses_amu: np.ndarray | None,
                         box_nm: np.ndarray | None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    g = resolved.groups
    if masses_amu is None:
        raise AnalysisError("com_distance needs atom masses")
    a_idx, b_idx = np.asarray(g[0]), np.asarray(g[1])
    ma, mb = masses_amu[a_idx], masses_amu[b_idx]
    xa = _whole(pos[:, a_idx].astype(np.float64), box_nm)
    xb = _whole(pos[:, b_idx].astype(np.float64), box_nm)
    ca = np.einsum("i,nia->na", ma / ma.sum(), xa)
    cb = np.einsum("i,nia->na", mb / mb.sum(), xb)
    d = minimum_image(cb - ca, box_nm)
    r = np.sqrt(np.einsum("na,na->n", d, d))
    u = d / r[:, None]
    w = np.concatenate([-ma / ma.sum(), mb / mb.sum()])
    grad = w[None, :, None] * u[:, None, :]
    return r, np.concatenate([a_idx, b_idx]), grad


def _rg_kernel(resolved: ResolvedCoordinate, pos: np.ndarray, masses_amu: np.ndarray | None,
               box_nm: np.ndarray | None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    g = resolved.groups
    if masses_amu is None:
        raise AnalysisError("rg needs atom masses")
    idx = np.asarray(g[0])
    m = masses_amu[idx]
    M = m.sum()
    x = _whole(pos[:, idx].astype(np.float64), box_nm)
    c = np.einsum("i,nia->na", m / M, x)
    dx = x - c[:, None, :]
    rg = np.sqrt(np.einsum("i,nia,nia->n", m, dx, dx) / M)
    with np.errstate(divide="ignore", invalid="ignore"):
        grad = (m / M)[None, :, None] * dx / rg[:, None, None]
    return rg, idx, grad


def _rmsd_kernel(resolved: ResolvedCoordinate, pos: np.ndarray, masses_amu: np.ndarray | None,
                 box_nm: np.ndarray | None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    g = resolved.groups
    idx = np.asarray(g[0])
    ref = np.asarray(resolved.reference_nm, dtype=np.float64)
    x = pos[:, idx].astype(np.float64)
    rot, cx, cy = kabsch(x, ref)
    # reference brought into each frame: (y - cy) R^T + cx
    ref_in_frame = np.einsum("ib,nab->nia", ref - cy, rot) + cx[:, None, :]
    res = x - ref_in_frame
    nat = idx.size
    value = np.sqrt(np.einsum("nia,nia->n", res, res) / nat)
    with np.errstate(divide="ignore", invalid="ignore"):
        grad = res / (nat * value)[:, None, None]
    return value, idx, grad


def _pc_kernel(resolved: ResolvedCoordinate, pos: np.ndarray, masses_amu: np.ndarray | None,
               box_nm: np.ndarray | None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    g = resolved.groups
    if resolved.pca is None:
        raise AnalysisError(f"{resolved.spec}: the principal components have not been computed yet")
    idx = np.asarray(g[0])
    value, grad = pc_value_and_gradient(resolved.pca, int(resolved.pc_index or 0), pos[:, idx])
    return value, idx, grad


_KERNELS: dict[str, Any] = {  # coordinate function -> kernel (value, atoms, gradient)
    "x": _cartesian_kernel,
    "y": _cartesian_kernel,
    "z": _cartesian_kernel,
    "distance": _distance_kernel,
    "angle": _angle_kernel,
    "dihedral": _dihedral_kernel,
    "com_distance": _com_distance_kernel,
    "rg": _rg_kernel,
    "rmsd": _rmsd_kernel,
    "pc": _pc_kernel,
}


def evaluate_arrays(
    defn_resolved: ResolvedCoordinate,
    positions_nm: np.ndarray,
    velocities_nm_per_ps: np.ndarray | None = None,
    masses_amu: np.ndarray | None = None,
    box_nm: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray | None, np.ndarray | None]:
    """Value, dq/dt and effective mass of one coordinate on arrays.

    Parameters
    ----------
    defn_resolved : ResolvedCoordinate whose groups index the atom axis of the arrays
    positions_nm : (n_frames, n_atoms, 3) nm
    velocities_nm_per_ps : (n_frames, n_atoms, 3) nm/ps, optional
    masses_amu : (n_atoms,) amu, optional (m_eff is None without masses)
    box_nm : (n_frames, 3, 3) nm, or (3, 3) / (3,) for a fixed box, or None

    Returns
    -------
    values : (n_frames,) in the coordinate's unit
    dqdt : (n_frames,) per ps, or None without velocities
    m_eff : (n_frames,), or None without masses
    """
    pos = np.asarray(positions_nm)
    if pos.ndim == 2:
        pos = pos[None]
    box = _frame_boxes(box_nm, pos.shape[0])
    masses = None if masses_amu is None else np.asarray(masses_amu, dtype=np.float64)
    values, atoms, grad = value_and_gradient(defn_resolved, pos, masses_amu=masses, box_nm=box)
    dqdt = None
    if velocities_nm_per_ps is not None:
        vel = np.asarray(velocities_nm_per_ps)
        if vel.ndim == 2:
            vel = vel[None]
        v = vel[:, atoms].astype(np.float64)
        # for pc this is e_k . M^1/2 (v R): the rotated, mass-weighted velocity projected on the mode
        dqdt = np.einsum("nia,nia->n", grad, v)
    m_eff = None
    if masses is not None:
        inv = np.einsum("nia,nia,i->n", grad, grad, 1.0 / masses[atoms])
        with np.errstate(divide="ignore"):
            m_eff = 1.0 / inv
    return values, dqdt, m_eff


def _frame_boxes(box_nm: np.ndarray | None, n: int) -> np.ndarray | None:
    if box_nm is None:
        return None
    box = np.asarray(box_nm, dtype=np.float64)
    if box.shape == (3,):
        box = np.diag(box)
    if box.shape == (3, 3):
        box = np.broadcast_to(box, (n, 3, 3))
    return box


# ----------------------------------------------------------------------------------------------
# Run adapters


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
