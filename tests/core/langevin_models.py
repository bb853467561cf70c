"""Small 1D stochastic simulators for the crossings tests, vectorised over independent walkers.

The quartic double well V(x) = dE (x^2 - 1)^2 (REFERENCES.md 6.3), unit mass, kT = 1 unless given.
Arrays are (n_frames, n_walkers); each walker is one replica. Walkers start from the Boltzmann
distribution (positions by inverse CDF on a fine grid, velocities Maxwellian), so the runs are
stationary from the first frame and censored segments carry no start-up bias.
"""

from __future__ import annotations

import numpy as np


def quartic_force(x: np.ndarray, barrier: float) -> np.ndarray:
    """-dV/dx for V = barrier (x^2 - 1)^2."""
    return -4.0 * barrier * x * (x * x - 1.0)


def boltzmann_positions(rng: np.random.Generator, n: int, barrier: float, kT: float = 1.0) -> np.ndarray:
    """n samples of p(x) ~ exp(-V(x)/kT) by inverse CDF on a grid of 20001 points over [-2.5, 2.5]."""
    grid = np.linspace(-2.5, 2.5, 20001)
    w = np.exp(-barrier * (grid**2 - 1.0) ** 2 / kT)
    cdf = np.cumsum(w)
    cdf /= cdf[-1]
    return np.interp(rng.random(n), cdf, grid)


def baoab_double_well(*, barrier: float, gamma: float, dt: float, n_steps: int, n_walkers: int,
                      record_every: int = 1, kT: float = 1.0, mass: float = 1.0, seed: int = 0
                      ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Langevin dynamics m x'' = -V'(x) - m gamma x' + noise by BAOAB splitting.

    Leimkuhler and Matthews (2013), Appl. Math. Res. Express 2013, 34: B (half kick), A (half drift),
    O (exact Ornstein-Uhlenbeck step), A, B.

    Returns
    -------
    t : (n_frames,), x : (n_frames, n_walkers), v : (n_frames, n_walkers)
    """
    rng = np.random.default_rng(seed)
    x = boltzmann_positions(rng, n_walkers, barrier, kT)
    v = rng.normal(0.0, np.sqrt(kT / mass), n_walkers)
    c1 = np.exp(-gamma * dt)
    c2 = np.sqrt((1.0 - c1 * c1) * kT / mass)
    n_frames = n_steps // record_every + 1
    xs = np.empty((n_frames, n_walkers))
    vs = np.empty((n_frames, n_walkers))
    xs[0], vs[0] = x, v
    f = quartic_force(x, barrier)
    half = 0.5 * dt
    k = 1
    for step in range(1, n_steps + 1):
        v += half * f / mass
        x += half * v
        v *= c1
        v += c2 * rng.standard_normal(n_walkers)
        x += half * v
        f = quartic_force(x, barrier)
        v += half * f / mass
        if step % record_every == 0:
            xs[k], vs[k] = x, v
            k += 1
    t = np.arange(n_frames) * dt * record_every
    return t, xs, vs


def brownian_double_well(*, barrier: float, diffusion: float, dt: float, n_steps: int, n_walkers: int,
                         record_every: int = 1, kT: float = 1.0, seed: int = 0
                         ) -> tuple[np.ndarray, np.ndarray]:
    """Overdamped dynamics dx = (D/kT) F dt + sqrt(2 D dt) xi by Euler-Maruyama (Kloeden and Platen 1992).

    Returns t : (n_frames,), x : (n_frames, n_walkers).
    """
    rng = np.random.default_rng(seed)
    x = boltzmann_positions(rng, n_walkers, barrier, kT)
    n_frames = n_steps // record_every + 1
    xs = np.empty((n_frames, n_walkers), dtype=np.float32 if n_frames * n_walkers > 5_000_000 else float)
    xs[0] = x
    drift = diffusion / kT * dt
    noise = np.sqrt(2.0 * diffusion * dt)
    k = 1
    for step in range(1, n_steps + 1):
        x += drift * quartic_force(x, barrier) + noise * rng.standard_normal(n_walkers)
        if step % record_every == 0:
            xs[k] = x
            k += 1
    t = np.arange(n_frames) * dt * record_every
    return t, xs
