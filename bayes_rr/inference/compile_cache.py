"""Compiled models kept on disk, so that a later process need not compile again.

nutpie turns a PyMC model into two numba C callbacks (log density with gradient, and
the expansion of a draw into every traced quantity). Compiling them is most of the
time of a fit of a small study, and numba's own cache cannot keep them: the callbacks
are closures whose cache key changes in every process. Here the machine code of both
callbacks is stored under a key computed from the model's graph, so a later process
that builds the same graph loads them in a fraction of a second.

The key is a SHA-256 of

* the model's log density and traced quantities as graphs: every operation with its
  parameters, every constant with its bytes, every input with its type; the values of
  shared variables, except the replaceable data (the reject counts), of which only
  the type counts;
* the versions of Python, numpy, numba, llvmlite, pytensor, PyMC and nutpie, the
  pytensor settings that change rewrites, and the CPU numba compiles for.

A graph with anything the key cannot describe faithfully (an operation without
declared parameters, a parameter whose text is an address) is not stored: it is
compiled as usual. Anything wrong with a stored entry (missing, unreadable, from
another version) means a normal compile that replaces it. The cache is a folder of
the toolkit's own (``BAYES_RR_CACHE_DIR``, else ``$XDG_CACHE_HOME/bayes_rr``, else
``~/.cache/bayes_rr``); ``BAYES_RR_COMPILE_CACHE=0`` turns it off.

The loaded callbacks are used exactly as nutpie's own: the same ``CompiledPyMCModel``,
the same initial points (rebuilt from the model each time), the same data
replacement. A test shows the draws equal those of a fresh compile.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import pickle
import sys
import uuid
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np

CACHE_FORMAT = 1
"""Bumped when what is stored, or how, changes; old entries are then ignored."""
CACHE_DIR_ENV = "BAYES_RR_CACHE_DIR"
CACHE_SWITCH_ENV = "BAYES_RR_COMPILE_CACHE"
DATA_NAMES = frozenset({"observed_calls"})
"""Shared variables whose values are data replaced between fits: only their type is
part of the key (their values are read at run time from nutpie's user data)."""
_FILES = ("logp.nbc", "expand.nbc")
_META = "meta.json"
MAX_ENTRIES = 200
"""Compiled models kept (about 1.5 MB each for the demo's design); the least recently
used go first."""


class _Unkeyable(Exception):
    """The graph holds something the key cannot describe faithfully."""


def cache_root() -> Path | None:
    """The folder of stored compiled models, or None when the cache is off."""
    if os.environ.get(CACHE_SWITCH_ENV, "1").strip().lower() in {"0", "false", "no", "off"}:
        return None
    given = os.environ.get(CACHE_DIR_ENV)
    if given:
        base = Path(given)
    else:
        xdg = os.environ.get("XDG_CACHE_HOME")
        base = (Path(xdg) if xdg else Path.home() / ".cache") / "bayes_rr"
    return base / "compiled-models"


# ---------------------------------------------------------------------------
# the key


def _value_text(value: object) -> str:
    from pytensor.graph.op import Op

    if isinstance(value, Op) or hasattr(type(value), "__props__"):
        return _op_text(value)
    if isinstance(value, np.ndarray):
        return f"array({value.dtype},{value.shape},{_bytes_digest(value)})"
    if isinstance(value, Mapping):
        items = sorted((repr(k), _value_text(v)) for k, v in value.items())
        return "{" + ",".join(f"{k}:{v}" for k, v in items) + "}"
    if isinstance(value, list | tuple | frozenset | set):
        parts = [_value_text(v) for v in value]
        if isinstance(value, frozenset | set):
            parts.sort()
        return f"{type(value).__name__}(" + ",".join(parts) + ")"
    if callable(value) and hasattr(value, "__qualname__"):
        return f"{getattr(value, '__module__', '?')}.{value.__qualname__}"
    text = repr(value)
    if " at 0x" in text:
        raise _Unkeyable(f"a parameter reads as an address: {text}")
    return f"{type(value).__qualname__}:{text}"


def _op_text(op) -> str:
    """An operation as its class and parameters: what pytensor's equality compares."""
    from pytensor.scalar.basic import Composite, ScalarOp

    cls = type(op)
    if hasattr(cls, "__props__"):
        fields = {name: getattr(op, name) for name in cls.__props__}
    elif isinstance(op, ScalarOp) and not isinstance(op, Composite):
        # scalar operations compare by class and attributes (output type rule, ...)
        fields = dict(vars(op))
    else:
        # without declared parameters two different operations can look alike
        raise _Unkeyable(f"operation {cls.__qualname__} declares no parameters")
    text = ",".join(f"{name}={_value_text(value)}" for name, value in sorted(fields.items()))
    return f"{cls.__module__}.{cls.__qualname__}({text})"


def _bytes_digest(array: np.ndarray) -> str:
    return hashlib.sha256(np.ascontiguousarray(array).tobytes()).hexdigest()


def _root_text(var) -> str:
    from pytensor.compile.sharedvalue import SharedVariable
    from pytensor.graph.basic import Constant

    if isinstance(var, Constant):
        data = np.asarray(var.data)
        return f"const {var.type} {data.dtype} {data.shape} {_bytes_digest(data)}"
    if isinstance(var, SharedVariable):
        value = np.asarray(var.get_value(borrow=True))
        if var.name in DATA_NAMES:
            return f"data {var.name} {var.type} ndim={value.ndim}"
        return f"shared {var.name} {var.type} {value.dtype} {value.shape} {_bytes_digest(value)}"
    return f"input {var.name} {var.type}"


def graph_fingerprint(outputs: Iterable) -> str:
    """SHA-256 of a pytensor graph: operations, parameters, constants and input types.

    Raises ``_Unkeyable`` for a graph the text cannot describe faithfully.
    """
    from pytensor.graph.traversal import graph_inputs, io_toposort

    outputs = list(outputs)
    roots = list(graph_inputs(outputs))
    index: dict[int, int] = {}
    digest = hashlib.sha256()

    def number(var) -> int:
        if id(var) not in index:
            index[id(var)] = len(index)
        return index[id(var)]

    for var in roots:
        digest.update(f"R{number(var)} {_root_text(var)}\n".encode())
    for node in io_toposort(roots, outputs):
        inputs = ",".join(str(number(var)) for var in node.inputs)
        results = ",".join(f"{number(var)}:{var.type}" for var in node.outputs)
        digest.update(f"N {_op_text(node.op)} ({inputs}) -> {results}\n".encode())
    digest.update(("O " + ",".join(str(number(var)) for var in outputs)).encode())
    return digest.hexdigest()


def _environment_text() -> str:
    from importlib import metadata

    import pytensor
    from numba.core.registry import cpu_target

    versions = [sys.version]
    for name in ("numpy", "numba", "llvmlite", "pytensor", "pymc", "nutpie"):
        versions.append(f"{name}={metadata.version(name)}")
    config = pytensor.config
    rewrite_settings = (
        "floatX", "optimizer_including", "optimizer_excluding", "optimizer_requiring",
        "numba__fastmath", "numba__cache",
    )  # fmt: skip
    settings = [f"{name}={getattr(config, name, None)}" for name in rewrite_settings]
    machine = repr(cpu_target.target_context.codegen().magic_tuple())
    return "\n".join([f"format={CACHE_FORMAT}", *versions, *settings, machine])


def model_key(model) -> str:
    """The cache key of ``model`` (raises ``_Unkeyable`` when it has none)."""
    digest = hashlib.sha256()
    digest.update(_environment_text().encode())
    digest.update(f"check_bounds={model.check_bounds}".encode())
    digest.update(graph_fingerprint([model.logp(), *model.unobserved_value_vars]).encode())
    return digest.hexdigest()


# ---------------------------------------------------------------------------
# compile, store, load


@dataclass(frozen=True)
class LoadedCallback:
    """A C callback loaded from the cache: what nutpie needs of numba's ``CFunc``."""

    address: int
    library: object  # keeps the machine code alive as long as the callback


@dataclass(frozen=True)
class CompileOutcome:
    """A compiled model and how it was obtained."""

    compiled: object
    source: str
    """"loaded" (from the cache), "stored" (compiled and stored), "compiled" (the cache
    is off or cannot hold this model) or "compiled (cache unreadable: ...)"."""
    key: str | None = None


class _CaptureResult:
    """numba's cache protocol for a ``CFunc``: nothing to load, keep what is compiled."""

    def __init__(self) -> None:
        self.result = None

    def load_overload(self, sig, target_context):
        return None

    def save_overload(self, sig, result) -> None:
        self.result = result


def _compile_callback(pyfunc, c_sig):
    from numba.core import sigutils
    from numba.core.ccallback import CFunc

    callback = CFunc(pyfunc, sigutils.normalize_signature(c_sig), locals={}, options={})
    capture = _CaptureResult()
    callback._cache = capture
    callback.compile()
    return callback, capture.result


def _shared_variables(model) -> dict:
    from pytensor.compile.sharedvalue import SharedVariable
    from pytensor.graph.traversal import graph_inputs

    outputs = [model.logp(), *model.unobserved_value_vars]
    return {v.name: v for v in graph_inputs(outputs) if isinstance(v, SharedVariable)}


def _shared_data(variables: Mapping, names: Iterable[str]) -> dict[str, np.ndarray]:
    data = {}
    for name in names:
        value = np.array(variables[name].get_value(), order="C", copy=True)
        value.flags.writeable = False
        data[name] = value
    return data


def _initial_point_function(model):
    from nutpie.compile_pymc import _wrap_with_lock
    from pymc.initial_point import make_initial_point_fn

    # nutpie's defaults: support points, jittered on every free variable
    return _wrap_with_lock(
        make_initial_point_fn(
            model=model,
            overrides=None,
            default_strategy="support_point",
            jitter_rvs=set(model.free_RVs),
            return_transformed=True,
        )
    )


def _assemble(model, meta: dict, logp_callback, expand_callback, initial_point_fn,
              logp_func=None, expand_func=None):  # fmt: skip
    from nutpie.compile_pymc import (
        CompiledPyMCModel,
        _prepare_dims_and_coords,
        _rv_dict_to_flat_array_wrapper,
        make_user_data,
    )

    names = meta["names"]
    slices = [slice(start, stop) for start, stop in meta["slices"]]
    shapes = [tuple(shape) for shape in meta["shapes"]]
    shape_info = (names, slices, shapes)
    variables = _shared_variables(model)
    missing = [name for name in meta["shared"] if name not in variables]
    if missing:
        raise _Unkeyable(f"shared variables {missing} are not in the model")
    shared_vars = {name: variables[name] for name in meta["shared"]}
    shared_data = _shared_data(variables, meta["shared"])
    dims, coords = _prepare_dims_and_coords(model, shape_info)
    flat_initial = _rv_dict_to_flat_array_wrapper(
        initial_point_fn, names=names[: meta["n_free"]], shapes=shapes[: meta["n_free"]]
    )
    return CompiledPyMCModel(
        _n_dim=meta["n_dim"],
        dims=dims,
        _coords=coords,
        _shapes={name: tuple(shape) for name, shape in zip(names, shapes, strict=True)},
        compiled_logp_func=logp_callback,
        compiled_expand_func=expand_callback,
        initial_point_func=flat_initial,
        shared_data=shared_data,
        user_data=make_user_data(shared_vars, shared_data),
        n_expanded=meta["n_expanded"],
        shape_info=shape_info,
        logp_func=logp_func,
        expand_func=expand_func,
    )


def _compile_fresh(model, initial_point_fn) -> tuple[object, dict, tuple]:
    """nutpie's numba compile, step by step, keeping numba's compile results."""
    from nutpie.compile_pymc import _make_c_expand_func, _make_c_logp_func, _make_functions

    n_dim, n_expanded, logp_fn_pt, expand_fn_pt, _, shape_info = _make_functions(
        model,
        mode="NUMBA",
        compute_grad=True,
        join_expanded=True,
        pymc_initial_point_fn=initial_point_fn,
        var_names=None,
    )
    logp_shared = [var.name for var in logp_fn_pt.get_shared()]
    expand_shared = [var.name for var in expand_fn_pt.get_shared()]
    variables = {var.name: var for var in [*logp_fn_pt.get_shared(), *expand_fn_pt.get_shared()]}
    order = list(dict.fromkeys([*logp_shared, *expand_shared]))
    shared_data = _shared_data(variables, order)
    from nutpie.compile_pymc import make_user_data

    user_data = make_user_data({name: variables[name] for name in order}, shared_data)
    logp_raw, logp_sig = _make_c_logp_func(
        n_dim, logp_fn_pt.vm.jit_fn, user_data, logp_shared, shared_data
    )
    expand_raw, expand_sig = _make_c_expand_func(
        n_dim, n_expanded, expand_fn_pt.vm.jit_fn, user_data, expand_shared, shared_data
    )
    logp_callback, logp_result = _compile_callback(logp_raw, logp_sig)
    expand_callback, expand_result = _compile_callback(expand_raw, expand_sig)
    names, slices, shapes = shape_info
    meta = {
        "n_dim": int(n_dim),
        "n_expanded": int(n_expanded),
        "n_free": len(model.free_RVs),
        "names": list(names),
        "slices": [[int(s.start), int(s.stop)] for s in slices],
        "shapes": [[int(d) for d in shape] for shape in shapes],
        "shared": order,
    }
    compiled = _assemble(model, meta, logp_callback, expand_callback, initial_point_fn,
                         logp_fn_pt, expand_fn_pt)  # fmt: skip
    return compiled, meta, (logp_result, expand_result)


def _write_atomic(path: Path, payload: bytes) -> None:
    temporary = path.with_name(f"{path.name}.tmp.{uuid.uuid4().hex[:12]}")
    try:
        temporary.write_bytes(payload)
        os.replace(temporary, path)
    finally:
        temporary.unlink(missing_ok=True)


def _store(folder: Path, key: str, meta: dict, results: tuple) -> bool:
    from numba.core.serialize import dumps

    if any(result.library.has_dynamic_globals for result in results):
        return False  # machine code that points into this process cannot be reused
    folder.mkdir(parents=True, exist_ok=True)
    for name, result in zip(_FILES, results, strict=True):
        _write_atomic(folder / name, dumps(result._reduce()))
    # the metadata goes last: an entry without it is incomplete and not read
    _write_atomic(folder / _META, json.dumps({"key": key, **meta}).encode())
    return True


def _entries(root: Path) -> list[Path]:
    """The cache's entries: only folders laid out and completed by this module."""
    found = []
    for meta in root.glob(f"*/*/{_META}"):
        entry = meta.parent
        if entry.parent.name == entry.name[:2] and len(entry.name) == 64:
            found.append(entry)
    return found


def prune(root: Path, keep: int | None = None) -> int:
    """Remove the least recently used entries beyond ``keep`` (MAX_ENTRIES); returns how
    many."""
    import shutil

    keep = MAX_ENTRIES if keep is None else keep
    entries = _entries(root)
    if len(entries) <= keep:
        return 0
    entries.sort(key=lambda entry: (entry / _META).stat().st_mtime)
    for entry in entries[: len(entries) - keep]:
        shutil.rmtree(entry, ignore_errors=True)
    return len(entries) - keep


def _load(folder: Path, key: str) -> tuple[dict, list] | None:
    from numba.core.compiler import CompileResult
    from numba.core.registry import cpu_target

    meta_path = folder / _META
    if not meta_path.is_file():
        return None
    meta = json.loads(meta_path.read_text())
    if meta.get("key") != key:
        raise ValueError("the stored entry has another key")
    context = cpu_target.target_context
    context.refresh()
    callbacks = []
    for name in _FILES:
        result = CompileResult._rebuild(context, *pickle.loads((folder / name).read_bytes()))
        address = result.library.get_pointer_to_function(result.fndesc.llvm_cfunc_wrapper_name)
        callbacks.append(LoadedCallback(address=address, library=result.library))
    os.utime(meta_path)  # recently used: kept longest when the cache is pruned
    return meta, callbacks


def compile_model(model) -> CompileOutcome:
    """nutpie's compiled model of ``model``, from the disk cache when it is there."""
    initial_point_fn = _initial_point_function(model)
    root = cache_root()
    key = None
    if root is not None:
        try:
            key = model_key(model)
        except _Unkeyable:
            root = None
    if root is None:
        compiled, _, _ = _compile_fresh(model, initial_point_fn)
        return CompileOutcome(compiled, "compiled")
    folder = root / key[:2] / key
    note = None
    try:
        loaded = _load(folder, key)
    except Exception as exc:
        loaded, note = None, f"{type(exc).__name__}: {exc}"
    if loaded is not None:
        meta, (logp_callback, expand_callback) = loaded
        try:
            compiled = _assemble(model, meta, logp_callback, expand_callback, initial_point_fn)
            return CompileOutcome(compiled, "loaded", key)
        except Exception as exc:
            note = f"{type(exc).__name__}: {exc}"
    compiled, meta, results = _compile_fresh(model, initial_point_fn)
    try:
        stored = _store(folder, key, meta, results)
    except Exception as exc:
        stored, note = False, f"{type(exc).__name__}: {exc}"
    if stored:
        with contextlib.suppress(OSError):  # another process pruning at the same time
            prune(root)
    source = "stored" if stored else "compiled"
    if note:
        source += f" (cache unreadable: {note})"
    return CompileOutcome(compiled, source, key)
