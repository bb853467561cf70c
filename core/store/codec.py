"""A codec between our frozen result dataclasses and a result-cache entry (arrays + one JSON tree).

:func:`encode` turns a result into ``(arrays, tree)``: every numpy array goes into ``arrays`` under a
short name (an array held twice, such as a shared time axis, is stored once), everything else into a
JSON tree of tagged objects. :func:`decode` rebuilds an equal object. What can be encoded:

- ``None``, ``bool``, ``int``, ``str``, ``float`` (NaN and the infinities included: JSON cannot hold
  them, so they are tagged), ``complex``, ``bytes``, numpy scalars (dtype kept);
- numpy arrays of any dtype and shape, 0-d and empty included: numbers natively, strings and raw
  bytes as their bytes, structured (record) arrays field by field, object arrays element by element;
- ``list``, ``tuple``, ``set``, ``frozenset``, ``dict`` (any encodable keys), ``pathlib.Path``;
- dataclass instances and enum members of classes defined in ``phasewake.core`` modules.

Reconstruction is safe: a class is looked up by module and qualified name only when the module is
``phasewake.core`` or one of its submodules (our own code) and the name is a plain attribute path;
the object found must be a dataclass or an enum, else the entry is refused. Dataclasses are rebuilt
field by field without calling ``__init__``/``__post_init__`` (so derived fields come back as they
were stored). Anything else raises :class:`Unencodable` (the caller then simply does not cache), and a
damaged or stale entry raises :class:`Undecodable` (the caller recomputes).
"""

from __future__ import annotations

import dataclasses
import enum
import importlib
import json
import math
import re
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

CODEC_VERSION = 1
TREE_ARRAY = "__tree__"  # the arrays-dict name of the JSON tree (uint8 bytes: HDF5 attributes are small)
ALLOWED_PREFIX = "phasewake.core"
_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
_NATIVE_KINDS = "biufc"  # h5py stores these dtypes as they are


class Unencodable(TypeError):
    """The object holds something the codec does not store (the result is then not cached)."""


class Undecodable(ValueError):
    """A cache entry that cannot be rebuilt (damaged, written by other code, or a class that changed)."""


# ---------------------------------------------------------------------------------------------------
# classes
# ---------------------------------------------------------------------------------------------------

def _allowed_module(module: str) -> bool:
    if module != ALLOWED_PREFIX and not module.startswith(ALLOWED_PREFIX + "."):
        return False
    return all(_NAME.match(part) for part in module.split("."))


def _class_ref(cls: type) -> str:
    module, qualname = cls.__module__, cls.__qualname__
    if not _allowed_module(module) or "<locals>" in qualname:
        raise Unencodable(f"{module}.{qualname} is not a phasewake.core class")
    return f"{module}:{qualname}"


def _resolve(ref: Any) -> type:
    """The class named ``module:qualname``, only inside phasewake.core (never any other import)."""
    if not isinstance(ref, str) or ref.count(":") != 1:
        raise Undecodable(f"bad class reference {ref!r}")
    module, qualname = ref.split(":")
    parts = qualname.split(".")
    if not _allowed_module(module) or not all(_NAME.match(p) for p in parts):
        raise Undecodable(f"class {ref!r} is outside phasewake.core")
    try:
        obj: Any = importlib.import_module(module)
        for p in parts:
            obj = getattr(obj, p)
    except (ImportError, AttributeError):
        raise Undecodable(f"class {ref!r} no longer exists") from None
    if not isinstance(obj, type) or not (dataclasses.is_dataclass(obj) or issubclass(obj, enum.Enum)):
        raise Undecodable(f"{ref!r} is not a dataclass or an enum")
    return obj


# ---------------------------------------------------------------------------------------------------
# dtypes (structured ones included) as JSON
# ---------------------------------------------------------------------------------------------------

def _dtype_json(dt: np.dtype) -> Any:
    if dt.fields is not None:
        names = list(dt.names or ())
        return {"names": names, "formats": [_dtype_json(dt.fields[n][0]) for n in names],
                "offsets": [int(dt.fields[n][1]) for n in names], "itemsize": int(dt.itemsize)}
    if dt.subdtype is not None:
        base, shape = dt.subdtype
        return {"base": _dtype_json(base), "shape": list(shape)}
    if dt.kind == "O":
        raise Unencodable("object fields inside a structured dtype")
    return dt.str


def _dtype_from(js: Any) -> np.dtype:
    try:
        if isinstance(js, str):
            dt = np.dtype(js)
            if dt.kind == "O":
                raise Undecodable("object dtype in a cache entry")
            return dt
        if isinstance(js, dict) and "base" in js:
            return np.dtype((_dtype_from(js["base"]), tuple(int(s) for s in js["shape"])))
        if isinstance(js, dict):
            return np.dtype({"names": [str(n) for n in js["names"]],
                             "formats": [_dtype_from(f) for f in js["formats"]],
                             "offsets": [int(o) for o in js["offsets"]], "itemsize": int(js["itemsize"])})
    except (TypeError, ValueError, KeyError) as exc:
        raise Undecodable(f"bad dtype {js!r}: {exc}") from None
    raise Undecodable(f"bad dtype {js!r}")


# ---------------------------------------------------------------------------------------------------
# encoding
# ---------------------------------------------------------------------------------------------------

def _float(x: float) -> Any:
    if math.isfinite(x):
        return x
    return {"t": "float", "v": "nan" if math.isnan(x) else ("inf" if x > 0 else "-inf")}


class _Encoder:
    def __init__(self) -> None:
        self.arrays: dict[str, np.ndarray] = {}
        self._seen: dict[int, tuple[np.ndarray, Any]] = {}  # id -> (array kept alive, its tree node)

    def array(self, a: np.ndarray) -> Any:
        hit = self._seen.get(id(a))
        if hit is not None and hit[0] is a:
            return hit[1]
        node = self._array(a)
        self._seen[id(a)] = (a, node)
        return node

    def _store(self, a: np.ndarray) -> str:
        name = f"a{len(self.arrays)}"
        self.arrays[name] = a
        return name

    def _array(self, a: np.ndarray) -> Any:
        dt = a.dtype
        shape = list(a.shape)
        if dt.fields is not None:
            cols = {n: self._array(np.ascontiguousarray(a[n])) for n in (dt.names or ())}
            return {"t": "rec", "dtype": _dtype_json(dt), "shape": shape, "cols": cols}
        if dt.kind == "O":
            return {"t": "obj", "shape": shape, "v": [self.value(x) for x in a.ravel(order="C").tolist()]}
        if dt.kind in _NATIVE_KINDS and dt.subdtype is None:
            return {"t": "nd", "k": self._store(a), "dtype": dt.str, "shape": shape}
        # strings (U, S), raw bytes (V), dates (M, m): their bytes, exactly
        raw = np.ascontiguousarray(a).reshape(-1).view(np.uint8) if a.size and dt.itemsize else \
            np.zeros(0, np.uint8)
        return {"t": "raw", "k": self._store(raw), "dtype": _dtype_json(dt), "shape": shape}

    def value(self, x: Any) -> Any:
        if isinstance(x, np.generic):  # first: np.float64 is also a float, np.str_ a str
            dt = x.dtype
            if dt.kind in "biuf" and dt.itemsize <= 8:
                v = x.item()
                return {"t": "np", "dtype": dt.str, "v": _float(v) if isinstance(v, float) else v}
            return {"t": "np0", "v": self.array(np.asarray(x))}
        if x is None or type(x) in (bool, str):
            return x
        if isinstance(x, int) and not isinstance(x, (bool, enum.Enum)):
            return int(x)
        if isinstance(x, float):
            return _float(float(x))
        if isinstance(x, np.ndarray):
            if type(x) not in (np.ndarray, np.memmap):
                raise Unencodable(f"array subclass {type(x).__name__}")
            return self.array(x)
        if isinstance(x, complex):
            return {"t": "complex", "re": _float(x.real), "im": _float(x.imag)}
        if isinstance(x, bytes):
            return {"t": "bytes", "v": x.hex()}
        if isinstance(x, enum.Enum):
            return {"t": "enum", "cls": _class_ref(type(x)), "v": self.value(x.value)}
        if dataclasses.is_dataclass(x) and not isinstance(x, type):
            ref = _class_ref(type(x))
            return {"t": "dc", "cls": ref,
                    "f": {f.name: self.value(getattr(x, f.name)) for f in dataclasses.fields(x)}}
        if isinstance(x, tuple) and type(x) is tuple:
            return {"t": "tuple", "v": [self.value(v) for v in x]}
        if isinstance(x, list) and type(x) is list:
            return {"t": "list", "v": [self.value(v) for v in x]}
        if type(x) in (set, frozenset):
            items = [self.value(v) for v in x]
            return {"t": "set" if type(x) is set else "frozenset",
                    "v": sorted(items, key=lambda v: json.dumps(v, sort_keys=True))}
        if type(x) is dict:
            return {"t": "dict", "v": [[self.value(k), self.value(v)] for k, v in x.items()]}
        if isinstance(x, Path):
            return {"t": "path", "v": str(x)}
        raise Unencodable(f"cannot store a {type(x).__module__}.{type(x).__qualname__}")


def encode(obj: Any) -> tuple[dict[str, np.ndarray], Any]:
    """``(arrays, tree)`` for ``obj``; ``tree`` is JSON-serialisable (no NaN). Raises :class:`Unencodable`."""
    enc = _Encoder()
    tree = {"codec": CODEC_VERSION, "root": enc.value(obj)}
    return enc.arrays, tree


def to_entry(obj: Any) -> dict[str, np.ndarray]:
    """The arrays of a cache entry for ``obj``: its arrays plus the JSON tree as bytes (``TREE_ARRAY``)."""
    arrays, tree = encode(obj)
    text = json.dumps(tree, allow_nan=False, separators=(",", ":"))
    out = dict(arrays)
    out[TREE_ARRAY] = np.frombuffer(text.encode("utf-8"), dtype=np.uint8)
    return out


# ---------------------------------------------------------------------------------------------------
# decoding
# ---------------------------------------------------------------------------------------------------

_FLOATS = {"nan": math.nan, "inf": math.inf, "-inf": -math.inf}


class _Decoder:
    def __init__(self, arrays: Mapping[str, np.ndarray]) -> None:
        self.arrays = arrays
        self._made: dict[int, np.ndarray] = {}  # id(tree node) -> array, so a shared array stays shared

    def _get(self, name: Any) -> np.ndarray:
        if not isinstance(name, str) or name not in self.arrays:
            raise Undecodable(f"array {name!r} missing from the entry")
        return np.asarray(self.arrays[name])

    def _shape(self, node: Mapping[str, Any]) -> tuple[int, ...]:
        return tuple(int(s) for s in node["shape"])

    def array(self, node: Mapping[str, Any]) -> np.ndarray:
        made = self._made.get(id(node))
        if made is not None:
            return made
        t = node.get("t")
        shape = self._shape(node)
        if t == "nd":
            dt = _dtype_from(node["dtype"])
            a = self._get(node["k"])
            if a.dtype != dt:
                a = a.astype(dt)
            out = a.reshape(shape)
        elif t == "raw":
            dt = _dtype_from(node["dtype"])
            raw = np.ascontiguousarray(self._get(node["k"]), dtype=np.uint8)
            out = raw.view(dt).reshape(shape) if raw.size else np.zeros(shape, dt)
        elif t == "rec":
            dt = _dtype_from(node["dtype"])
            out = np.zeros(shape, dtype=dt)
            for name, col in node["cols"].items():
                out[name] = self.array(col)
        elif t == "obj":
            flat = np.empty(len(node["v"]), dtype=object)
            for i, v in enumerate(node["v"]):  # one by one: numpy would unpack sequences
                flat[i] = self.value(v)
            out = flat.reshape(shape)
        else:
            raise Undecodable(f"unknown array tag {t!r}")
        self._made[id(node)] = out
        return out

    def value(self, node: Any) -> Any:
        if node is None or isinstance(node, (bool, int, float, str)):
            return node
        if not isinstance(node, dict):
            raise Undecodable("untagged container in the tree")
        t = node.get("t")
        if t in ("nd", "raw", "rec", "obj"):
            return self.array(node)
        if t == "float":
            return _FLOATS[node["v"]]
        if t == "np":
            return np.dtype(node["dtype"]).type(self.value(node["v"]))
        if t == "np0":
            return self.value(node["v"])[()]
        if t == "complex":
            return complex(self.value(node["re"]), self.value(node["im"]))
        if t == "bytes":
            return bytes.fromhex(node["v"])
        if t == "tuple":
            return tuple(self.value(v) for v in node["v"])
        if t == "list":
            return [self.value(v) for v in node["v"]]
        if t == "set":
            return {self.value(v) for v in node["v"]}
        if t == "frozenset":
            return frozenset(self.value(v) for v in node["v"])
        if t == "dict":
            return {self.value(k): self.value(v) for k, v in node["v"]}
        if t == "path":
            return Path(node["v"])
        if t == "enum":
            cls = _resolve(node["cls"])
            if not issubclass(cls, enum.Enum):
                raise Undecodable(f"{node['cls']} is not an enum")
            return cls(self.value(node["v"]))
        if t == "dc":
            return self._dataclass(node)
        raise Undecodable(f"unknown tag {t!r}")

    def _dataclass(self, node: Mapping[str, Any]) -> Any:
        cls = _resolve(node["cls"])
        if not dataclasses.is_dataclass(cls):
            raise Undecodable(f"{node['cls']} is not a dataclass")
        stored = node["f"]
        names = [f.name for f in dataclasses.fields(cls)]
        if sorted(names) != sorted(stored):
            raise Undecodable(f"the fields of {node['cls']} changed since the entry was written")
        obj = cls.__new__(cls)
        for name in names:
            object.__setattr__(obj, name, self.value(stored[name]))
        return obj


def decode(arrays: Mapping[str, np.ndarray], tree: Any) -> Any:
    """The object :func:`encode` turned into ``(arrays, tree)``. Raises :class:`Undecodable`."""
    if not isinstance(tree, dict) or tree.get("codec") != CODEC_VERSION or "root" not in tree:
        raise Undecodable("not an entry of this codec version")
    try:
        return _Decoder(arrays).value(tree["root"])
    except (KeyError, TypeError, ValueError, IndexError) as exc:
        if isinstance(exc, Undecodable):
            raise
        raise Undecodable(f"damaged entry: {exc}") from None


def from_entry(arrays: Mapping[str, np.ndarray]) -> Any:
    """Inverse of :func:`to_entry`."""
    raw = arrays.get(TREE_ARRAY)
    if raw is None:
        raise Undecodable("no result tree in the entry")
    try:
        tree = json.loads(np.asarray(raw, dtype=np.uint8).tobytes().decode("utf-8"))
    except (UnicodeDecodeError, ValueError) as exc:
        raise Undecodable(f"damaged result tree: {exc}") from None
    return decode(arrays, tree)
