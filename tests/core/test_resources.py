"""An analysis that would need more memory than is available says so before it starts."""

import numpy as np
import pytest

from phasewake.core.errors import ResourceError
from phasewake.core.progress import drive
from phasewake.core.readers.memory import run_from_arrays
from phasewake.core.resources import available_memory_bytes, require_memory


def test_available_memory_is_known_here():
    avail = available_memory_bytes()
    assert avail is not None and avail > 10**8


def test_require_memory_names_the_numbers():
    require_memory(1e6, what="a small thing", available=10**9)
    with pytest.raises(ResourceError, match=r"needs about 50\.0 GB of memory; 2\.0 GB is available"):
        require_memory(50e9, what="a big thing", available=2 * 10**9)


def test_exact_pca_of_too_many_coordinates_is_refused_before_reading(monkeypatch):
    import phasewake.core.resources as res

    monkeypatch.setattr(res, "available_memory_bytes", lambda: 10**6)  # a machine with 1 MB free
    rng = np.random.default_rng(0)
    run = run_from_arrays(rng.standard_normal((20, 200, 3)), np.arange(20.0), np.ones(200))
    with pytest.raises(ResourceError, match="exact PCA of 600 coordinates"):
        from phasewake.core.analyses.projection import compute_pca

        drive(compute_pca(run, atom_indices=np.arange(200), fit=False))
