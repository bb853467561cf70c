"""The result codec (core/store/codec.py): real analysis results survive a cache entry field for field.

The reference for every round trip is the object itself (the analyses' numbers are checked against
outside references in their own test files); here we check that what comes back from an HDF5 entry
equals what went in: same classes, same scalars, arrays equal with NaN in the same places and the same
dtype. The entry goes through a real ResultCache (h5py) so the file layer is part of the check.
"""

import dataclasses
import enum
import math
from pathlib import Path

import numpy as np
import pytest

from phasewake.core.progress import drive
from phasewake.core.readers import open_run
from phasewake.core.store import codec as resultcodec
from phasewake.core.store.cache import ResultCache
from tests.helpers import assert_same

SAMPLES = Path(__file__).resolve().parents[2] / "sample_data"


def through_cache(obj, tmp_path):
    cache = ResultCache(tmp_path / "codec-cache", enabled=True)
    cache.put("e" * 32, resultcodec.to_entry(obj), {"analysis": "test"})
    entry = cache.get("e" * 32)
    assert entry is not None
    return resultcodec.from_entry(entry.arrays)


def roundtrip(obj, tmp_path):
    back = through_cache(obj, tmp_path)
    assert_same(obj, back)
    return back


@pytest.fixture(scope="module")
def nve_run():
    return open_run([SAMPLES / "dimer_nve.h5md"])


# ---- the codec on awkward values -------------------------------------------------------------------

class _Colour(enum.Enum):  # defined outside phasewake.core: must not be stored
    RED = 1


def test_awkward_values(tmp_path):
    from phasewake.core.analyses.verdicts import Threshold

    rec = np.zeros(3, dtype=[("kind", "U10"), ("t", "<f8"), ("n", "<i4"), ("xyz", "<f4", (3,))])
    rec["kind"] = ["transition", "recross", ""]
    rec["t"] = [0.5, np.nan, -np.inf]
    value = {
        "nan": math.nan, "inf": math.inf, "ninf": -math.inf, "neg0": -0.0, "big": 2**70, "t": True,
        "none": None, "s": "ünïcode", "path": Path("/tmp/x.h5"), "c": 1 + 2j, "b": b"\x00\xff",
        "np": (np.float32(1.5), np.int64(-3), np.bool_(True), np.float64(np.nan), np.str_("q")),
        "arrays": [np.zeros((0, 3)), np.array(3.0), np.array([1, 2], dtype=">i2"), np.array([True, False]),
                   np.array([np.nan, 1.0, np.inf], dtype=np.float16), np.array(["ab", "c"]),
                   np.array([b"x\x00", b"yz"]), np.arange(6, dtype=np.complex64).reshape(2, 3), rec,
                   np.array(["2026-12-02"], dtype="datetime64[D]"), np.empty((2, 0), dtype="U3")],
        3: "int key", (1, 2): "tuple key", "set": {1, 2}, "fs": frozenset({"a"}),
        "dc": Threshold(kind="k", caution=1.0, problem=math.nan, unit="K", source="common practice"),
    }
    obj_arr = np.empty(2, dtype=object)
    obj_arr[0], obj_arr[1] = (1, 2), None
    value["obj"] = obj_arr
    back = through_cache(value, tmp_path)
    assert back.keys() == value.keys()
    for k in value:
        if k in ("set", "fs"):
            assert back[k] == value[k]
        else:
            assert_same(value[k], back[k], repr(k))
    assert math.copysign(1.0, back["neg0"]) == -1.0


def test_shared_array_is_stored_once():
    t = np.arange(1000.0)
    arrays, _ = resultcodec.encode((t, t, {"again": t}))
    assert len(arrays) == 1


def test_foreign_classes_are_not_stored():
    @dataclasses.dataclass(frozen=True)
    class Local:
        x: int = 1

    for bad in (Local(), _Colour.RED, object(), np.ma.masked_array([1.0]), lambda: 0):
        with pytest.raises(resultcodec.Unencodable):
            resultcodec.encode(bad)


def test_reconstruction_never_imports_outside_phasewake_core():
    good_arrays, tree = resultcodec.encode(dataclasses.replace(_threshold()))
    for ref in ("os:system", "subprocess:Popen", "phasewake.app.cli:main", "phasewake.core.store.cache:os.system",
                "phasewake.corex:Thing", "phasewake.core.analyses.verdicts:<locals>.X", "phasewake.core.store.cache:make_key"):
        t = {"codec": tree["codec"], "root": {**tree["root"], "cls": ref}}
        with pytest.raises(resultcodec.Undecodable):
            resultcodec.decode(good_arrays, t)
    # a class whose fields changed since the entry was written is refused, not half-built
    t = {"codec": tree["codec"], "root": {**tree["root"], "f": {"kind": "k"}}}
    with pytest.raises(resultcodec.Undecodable):
        resultcodec.decode(good_arrays, t)
    with pytest.raises(resultcodec.Undecodable):
        resultcodec.from_entry({})


def _threshold():
    from phasewake.core.analyses.verdicts import Threshold

    return Threshold(kind="k", caution=1.0, problem=2.0, unit="K", source="common practice")


# ---- real results ----------------------------------------------------------------------------------

def test_audit_result_roundtrip(nve_run, tmp_path):
    from phasewake.core.analyses.audit import audit_run

    res = drive(audit_run(nve_run))
    assert res.energy is not None and res.temperature is not None  # the parts worth checking are there
    roundtrip(res, tmp_path)


def test_vacf_and_spectrum_roundtrip(nve_run, tmp_path):
    from phasewake.core.analyses.velocity import vacf, vibrational_spectrum

    v = drive(vacf(nve_run, groups={"dimer": [0, 1], "bath": list(range(2, nve_run.n_atoms))}))
    roundtrip(v, tmp_path)
    roundtrip(drive(vibrational_spectrum(nve_run, max_lag_ps=1.0)), tmp_path)


def test_pca_roundtrip(nve_run, tmp_path):
    from phasewake.core.analyses.projection import compute_pca

    pca = drive(compute_pca(nve_run, atom_indices=np.arange(6), n_components=3, stop=120))
    roundtrip(pca, tmp_path)


def test_crossings_roundtrip(tmp_path):
    from phasewake.core.analyses.coordinates import compute_coordinates
    from phasewake.core.analyses.crossings import analyse_crossings, crossings_work

    run = open_run([SAMPLES / "dimer_langevin.h5md"])
    s = drive(compute_coordinates(run, ["distance(0, 1)"]))[0]
    roundtrip(s, tmp_path)
    res = analyse_crossings(s.time_ps, s.values, s.velocity, unit=s.unit, temperature_K=120.0)
    assert len(res.events) > 0  # structured event rows with string fields are part of the check
    roundtrip(res, tmp_path)
    roundtrip(drive(crossings_work([(s.time_ps, s.values)], states=(0.42, 0.52), unit=s.unit)), tmp_path)


def test_correlation_and_sampling_results_roundtrip(nve_run, tmp_path):
    from phasewake.core.analyses import correlation, sampling

    rng = np.random.default_rng(7)
    x = np.cumsum(rng.normal(size=4000)) * 0.01 + rng.normal(size=4000)
    y = rng.normal(size=4000)
    results = [
        correlation.analyse_series(x, dt_ps=0.01, unit="nm"),
        correlation.blocking(x, unit="nm"),
        correlation.detect_equilibration(x, dt_ps=0.01),
        sampling.segment_divergence(x),
        sampling.rhat_segments(x),
        sampling.rhat(np.stack([x, y])),
        sampling.running_average(x, dt_ps=0.01, unit="nm"),
        sampling.recurrence(x, dt_ps=0.01, max_points=300),
        sampling.coverage_over_time(x, y, dt_ps=0.01),
        drive(sampling.thirumalai_mountain_kinetic(nve_run)),
    ]
    for r in results:
        roundtrip(r, tmp_path)
