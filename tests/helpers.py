"""Helpers shared by several test modules: deep equality of results, an AMBER NetCDF writer and a water
topology. (Fixtures live in conftest.py; these are plain functions.)"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import numpy as np


def assert_same(a, b, where="root"):
    """Deep equality: same type, arrays equal incl. NaN positions and dtype, NaN == NaN for floats."""
    assert type(a) is type(b), f"{where}: {type(a)} vs {type(b)}"
    if isinstance(a, np.ndarray):
        assert a.dtype == b.dtype and a.shape == b.shape, f"{where}: {a.dtype}{a.shape} vs {b.dtype}{b.shape}"
        if a.dtype.names:
            for n in a.dtype.names:
                assert_same(a[n], b[n], f"{where}[{n}]")
        elif a.dtype.kind == "O":
            for i, (x, y) in enumerate(zip(a.ravel(), b.ravel(), strict=True)):
                assert_same(x, y, f"{where}[{i}]")
        else:
            assert np.array_equal(a, b, equal_nan=a.dtype.kind in "fc"), where
    elif dataclasses.is_dataclass(a):
        for f in dataclasses.fields(a):
            assert_same(getattr(a, f.name), getattr(b, f.name), f"{where}.{f.name}")
    elif isinstance(a, dict):
        assert list(a) == list(b), where
        for k in a:
            assert_same(a[k], b[k], f"{where}[{k!r}]")
    elif isinstance(a, (list, tuple)):
        assert len(a) == len(b), where
        for i, (x, y) in enumerate(zip(a, b, strict=True)):
            assert_same(x, y, f"{where}[{i}]")
    elif isinstance(a, (float, np.floating)) and math.isnan(a):
        assert math.isnan(b), where
    else:
        assert a == b, f"{where}: {a!r} vs {b!r}"


def amber_netcdf(path: Path, xyz_nm: np.ndarray, vel_internal: np.ndarray, time_ps: np.ndarray) -> Path:
    """An AMBER NetCDF trajectory laid out per the AMBER NetCDF convention (AMBER cannot be
    installed here), written with scipy's NetCDF-3 writer: coordinates in Angstrom, velocities in AMBER's
    internal unit with scale_factor 20.455, time in ps."""
    from scipy.io import netcdf_file

    with netcdf_file(str(path), "w", version=2) as nc:
        nc.Conventions = b"AMBER"
        nc.ConventionVersion = b"1.0"
        nc.program = b"test"
        nc.programVersion = b"1"
        nc.createDimension("frame", None)
        nc.createDimension("spatial", 3)
        nc.createDimension("atom", xyz_nm.shape[1])
        sp = nc.createVariable("spatial", "c", ("spatial",))
        sp[:] = np.array(list("xyz"), dtype="S1")
        t = nc.createVariable("time", "f", ("frame",))
        t.units = b"picosecond"
        c = nc.createVariable("coordinates", "f", ("frame", "atom", "spatial"))
        c.units = b"angstrom"
        v = nc.createVariable("velocities", "f", ("frame", "atom", "spatial"))
        v.units = b"angstrom/picosecond"
        v.scale_factor = np.float32(20.455)
        t[:] = time_ps
        c[:] = xyz_nm * 10
        v[:] = vel_internal
    return path


def random_rotations(rng: np.random.Generator, n: int) -> np.ndarray:
    """``n`` rotation matrices, shape (n, 3, 3), uniform over the rotations (unit quaternions from
    normalised Gaussians; Shoemake, Graphics Gems III, 1992, from memory)."""
    q = rng.normal(size=(n, 4))
    q /= np.linalg.norm(q, axis=1, keepdims=True)
    w, x, y, z = q.T
    return np.stack([
        np.stack([1 - 2 * (y * y + z * z), 2 * (x * y - z * w), 2 * (x * z + y * w)], -1),
        np.stack([2 * (x * y + z * w), 1 - 2 * (x * x + z * z), 2 * (y * z - x * w)], -1),
        np.stack([2 * (x * z - y * w), 2 * (y * z + x * w), 1 - 2 * (x * x + y * y)], -1),
    ], -2)


def water_topology(n_waters: int, flexible_extra: int = 0, *, bonds: bool = True):  # -> mdtraj.Topology
    """``n_waters`` waters (O bonded to H1 and H2 unless ``bonds`` is False) and ``flexible_extra``
    six-carbon chains."""
    import mdtraj as md

    top = md.Topology()
    chain = top.add_chain()
    for _ in range(n_waters):
        r = top.add_residue("HOH", chain)
        o = top.add_atom("O", md.element.oxygen, r)
        h1 = top.add_atom("H1", md.element.hydrogen, r)
        h2 = top.add_atom("H2", md.element.hydrogen, r)
        if bonds:
            top.add_bond(o, h1)
            top.add_bond(o, h2)
    for _ in range(flexible_extra):  # a 6-atom chain C-C-C-C-C-C, flexible, not a small residue
        r = top.add_residue("HEX", chain)
        atoms = [top.add_atom(f"C{i}", md.element.carbon, r) for i in range(6)]
        for a, b in zip(atoms[:-1], atoms[1:]):
            top.add_bond(a, b)
    return top
