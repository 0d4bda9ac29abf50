"""State files: matrix product states in HDF5, in a versioned layout of our own.

Layout (format ``netprobe-state``, version 3)
-----------------------------------------------
::

    /                       attributes: format = "netprobe-state", format_version = 3,
                            package_version, kind ("state" or "checkpoint"), created (UTC, ISO 8601),
                            seed (JSON: an integer or null), model_text (the model file),
                            overrides (JSON object of the --set values), info (JSON object),
                            rng_state (JSON of numpy's bit_generator.state, or "")
    /mps                    attributes: num_sites, centre (-1: none), site_space, conserved (JSON list),
                            charge_moduli, basis_order
    /mps/site_00000 ...     one block tensor per site (below)

A block tensor is a group with attributes ``charge``, ``charge_moduli``, ``dtype`` and
``directions`` (one per leg), datasets ``leg<i>_charges`` (n_sectors, k) and ``leg<i>_dims``
(n_sectors,) per leg, ``keys`` (n_blocks, n_legs) with the sector indices of every stored block and
``data``: the blocks flattened in C order and concatenated in the order of ``keys``.

Version 2 writes the tensor data (every ``data`` dataset) with HDF5's Fletcher-32 checksum filter,
so a damaged byte in a tensor is detected when it is read; version 1 (no checksums, otherwise the
same) is still read.

Version 3 renamed things of the model-file language: the ``/mps`` attribute ``conserve`` became
``conserved``, the charge label ``2Sz`` became ``twice_sz`` and the site space ``electron`` became
``spinful_fermion`` (its operator ``n_updn`` became ``n_pair``). Files of versions 1 and 2 are still
read: their attribute, labels and space name, and the model text stored in them, are translated to
the new names on reading (:func:`upgrade_model_text`); nothing else differs.
Every read is validated against the layout (shapes, sector indices in range, finite data, a known
random-generator state), and anything that does not fit is reported as a damaged file, in one line
that names the file and what is wrong.

Everything is numbers, h5py strings and JSON text; nothing is pickled. Files are written to a
temporary name in the target folder, flushed to disk and renamed into place (``os.replace``), so a
reader never sees a half-written file and a killed writer leaves the previous file intact.
"""

from __future__ import annotations

import contextlib
import datetime
import json
import os
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import h5py
import numpy as np

from netprobe import __version__
from netprobe.errors import NetprobeError, StateFileError
from netprobe.engines.mps import MPS, SiteBasis
from netprobe.model.sites import site_space
from netprobe.tensor import BlockTensor, ChargeRule, Leg
from netprobe.model.spec import build_model, parse_spec

__all__ = [
    "FORMAT_NAME",
    "FORMAT_VERSION",
    "upgrade_model_text",
    "SavedState",
    "save_state",
    "load_state",
    "atomic_file",
    "remove_stale_temporaries",
    "write_block_tensor",
    "read_block_tensor",
    "write_mps",
    "read_mps",
    "check_rng_state",
    "damaged",
]

FORMAT_NAME = "netprobe-state"
FORMAT_VERSION = 3
_READABLE_VERSIONS = (1, 2, 3)
_DTYPES = ("float64", "complex128")
_BIT_GENERATORS = ("PCG64", "PCG64DXSM", "MT19937", "Philox", "SFC64")


# --------------------------------------------------------------------------------------------------
# Low level: block tensors and states inside an open HDF5 group
# --------------------------------------------------------------------------------------------------


# Names of layout versions 1 and 2, read and translated (see the module notes).
_OLD_SPACES = {"electron": "spinful_fermion"}
_OLD_LABELS = {"2Sz": "twice_sz"}
_OLD_MODEL_WORDS = ((re.compile(r"^(\s*)conserve(\s*=)", re.M), r"\1conserved\2"),
                    (re.compile(r"2Sz"), "twice_sz"),
                    (re.compile(r"(['\"])electron\1"), r"\1spinful_fermion\1"),
                    (re.compile(r"\bn_updn\b"), "n_pair"))


def upgrade_model_text(text: str) -> str:
    """The model file stored by layout version 1 or 2, in today's names (unchanged if already new).

    Renames the key ``conserve`` to ``conserved``, the charge label ``2Sz`` to ``twice_sz``, the site
    space ``electron`` to ``spinful_fermion`` and its operator ``n_updn`` to ``n_pair``.
    """
    for pattern, new in _OLD_MODEL_WORDS:
        text = pattern.sub(new, text)
    return text


def write_block_tensor(group: h5py.Group, tensor: BlockTensor) -> None:
    """Write a block tensor into an (empty) HDF5 group."""
    group.attrs["charge"] = np.asarray(tensor.charge, np.int64)
    group.attrs["charge_moduli"] = np.asarray(tensor.rule.moduli, np.int64)
    group.attrs["dtype"] = str(tensor.dtype)
    group.attrs["directions"] = np.array([leg.direction for leg in tensor.legs], np.int64)
    for i, leg in enumerate(tensor.legs):
        _write_dataset(group, f"leg{i}_charges", np.asarray(leg.charges, np.int64))
        _write_dataset(group, f"leg{i}_dims", np.asarray(leg.dims, np.int64))
    keys = sorted(tensor.blocks)
    _write_dataset(group, "keys", np.array(keys, np.int64).reshape(len(keys), tensor.ndim))
    data = [np.ascontiguousarray(tensor.blocks[k]).reshape(-1) for k in keys]
    flat = np.concatenate(data) if data else np.zeros(0, tensor.dtype)
    _write_dataset(group, "data", flat.astype(tensor.dtype, copy=False), checksum=True)


def _write_dataset(group: h5py.Group, name: str, data: np.ndarray, checksum: bool = False) -> None:
    # Fletcher-32 needs chunked storage, which costs a chunk index per dataset: the tensor data carry
    # the checksum; the small integer tables are checked against each other on reading instead
    group.create_dataset(name, data=data, fletcher32=checksum and data.size > 0)


def _dataset(group: h5py.Group, name: str, ndim: int, kind: str) -> np.ndarray:
    """Read dataset ``name`` of the expected rank and number kind ("i": integers, "fc": numbers)."""
    if name not in group:
        raise ValueError(f"{group.name}/{name} is missing")
    node = group[name]
    if not isinstance(node, h5py.Dataset):
        raise ValueError(f"{node.name} is not a dataset")
    if node.ndim != ndim:
        raise ValueError(f"{node.name} has {node.ndim} dimension(s), the layout has {ndim}")
    if node.dtype.kind not in kind:
        raise ValueError(f"{node.name} holds {node.dtype}, not {'integers' if kind == 'i' else 'numbers'}")
    try:
        return np.asarray(node[()])
    except OSError as err:  # a failed Fletcher-32 check or an unreadable chunk
        raise ValueError(f"{node.name} cannot be read ({' '.join(str(err).split())}): its checksum "
                         "does not match or the data are cut short") from None


def _int_attribute(attrs, name: str, shape: tuple | None = None) -> np.ndarray:
    if name not in attrs:
        raise ValueError(f"attribute {name} is missing")
    value = np.asarray(attrs[name])
    if value.dtype.kind not in "iu" or (shape is not None and value.shape != shape) or \
            (shape is None and value.ndim != 1):
        wanted = "a list of integers" if shape is None else "an integer"
        raise ValueError(f"attribute {name} = {value!r} is not {wanted}")
    return value.astype(np.int64)


def read_block_tensor(group: h5py.Group) -> BlockTensor:
    """Read a block tensor written by :func:`write_block_tensor` (validated on the way in).

    Raises
    ------
    ValueError
        For a group that does not fit the layout (the message says where and what);
        :func:`load_state` turns it into :class:`StateFileError`.
    """
    where = group.name
    moduli = _int_attribute(group.attrs, "charge_moduli")
    rule = ChargeRule(tuple(int(m) for m in moduli))
    directions = [int(d) for d in _int_attribute(group.attrs, "directions")]
    charge = _int_attribute(group.attrs, "charge")
    if charge.shape != (rule.k,):
        raise ValueError(f"{where}: charge {charge.tolist()} does not have {rule.k} component(s)")
    dtype_text = _attribute_text(group.attrs, "dtype")
    if dtype_text not in _DTYPES:
        raise ValueError(f"{where}: dtype {dtype_text!r} is not one of {', '.join(_DTYPES)}")
    dtype = np.dtype(dtype_text)
    legs = []
    for i, d in enumerate(directions):
        charges = _dataset(group, f"leg{i}_charges", 2, "iu").astype(np.int64)
        dims = _dataset(group, f"leg{i}_dims", 1, "iu").astype(np.int64)
        if charges.shape != (dims.size, rule.k) or dims.size == 0:
            raise ValueError(f"{where}: leg {i} has {charges.shape} charges for {dims.size} sectors")
        legs.append(Leg(charges, dims, d))
    keys = _dataset(group, "keys", 2, "iu").astype(np.int64)
    if keys.shape[1:] != (len(legs),) and keys.size:
        raise ValueError(f"{where}: keys have shape {keys.shape}, the tensor has {len(legs)} legs")
    keys = keys.reshape(-1, len(legs))
    counts = np.array([leg.n_sectors for leg in legs], np.int64)
    if keys.size and (keys.min() < 0 or np.any(keys >= counts)):
        raise ValueError(
            f"{where}: a block key has a sector index out of range (sector counts {counts.tolist()})")
    flat = _dataset(group, "data", 1, "fc")
    if flat.size and not np.all(np.isfinite(flat)):
        raise ValueError(f"{where}: the tensor data hold NaN or infinite numbers")
    if flat.dtype.kind == "c" and dtype.kind != "c":
        raise ValueError(f"{where}: complex data for dtype {dtype}")
    blocks, start = {}, 0
    for key in map(tuple, keys.tolist()):
        shape = tuple(int(leg.dims[s]) for s, leg in zip(key, legs))
        size = int(np.prod(shape, dtype=np.int64))
        if start + size > flat.size:
            raise ValueError("block data shorter than the block keys need")
        blocks[key] = flat[start:start + size].reshape(shape)
        start += size
    if start != flat.size:
        raise ValueError("block data longer than the block keys need")
    return BlockTensor(legs, charge, rule, blocks, dtype=dtype)


def write_mps(group: h5py.Group, state: MPS) -> None:
    """Write a state (tensors, canonical centre and local basis) into an (empty) HDF5 group."""
    basis = state.basis
    group.attrs["num_sites"] = state.num_sites
    group.attrs["centre"] = -1 if state.centre is None else int(state.centre)
    group.attrs["site_space"] = basis.space.name
    group.attrs["conserved"] = json.dumps(list(basis.conserved))
    group.attrs["charge_moduli"] = np.asarray(basis.rule.moduli, np.int64)
    group.attrs["basis_order"] = np.asarray(basis.order, np.int64)
    for i, t in enumerate(state.tensors):
        write_block_tensor(group.create_group(f"site_{i:05d}"), t)


def read_mps(group: h5py.Group) -> MPS:
    """Read a state written by :func:`write_mps`.

    Raises
    ------
    ValueError, NetprobeError
        For a damaged group or an unknown site space.
    """
    name = _attribute_text(group.attrs, "site_space")
    space = site_space(_OLD_SPACES.get(name, name))
    key = "conserved" if "conserved" in group.attrs or "conserve" not in group.attrs else "conserve"  # v1, v2
    conserved = json.loads(_attribute_text(group.attrs, key))
    if isinstance(conserved, list):
        conserved = [_OLD_LABELS.get(c, c) if isinstance(c, str) else c for c in conserved]
    if not isinstance(conserved, list) or not all(isinstance(c, str) for c in conserved):
        raise ValueError(f"{group.name}: conserved {conserved!r} is not a list of charge names")
    basis = SiteBasis.from_space(space, conserved)
    if not np.array_equal(np.asarray(group.attrs.get("basis_order")), basis.order) or \
            tuple(int(m) for m in _int_attribute(group.attrs, "charge_moduli")) != basis.rule.moduli:
        raise ValueError("the stored local basis differs from the site space's")
    n = int(_int_attribute(group.attrs, "num_sites", ()))
    stored = sum(1 for name in group if name.startswith("site_"))
    if not 1 <= n or n != stored:
        raise ValueError(f"{group.name}: num_sites = {n} but {stored} site tensors are stored")
    tensors = []
    for i in range(n):
        name = f"site_{i:05d}"
        if not isinstance(group.get(name), h5py.Group):
            raise ValueError(f"{group.name}/{name} is missing")
        tensors.append(read_block_tensor(group[name]))
    centre = int(_int_attribute(group.attrs, "centre", ()))
    if not -1 <= centre < n:
        raise ValueError(f"{group.name}: centre {centre} lies outside the {n} sites")
    return MPS(tensors, basis, centre=None if centre < 0 else centre)


def _attribute_text(attrs, name: str) -> str:
    if name not in attrs:
        raise ValueError(f"attribute {name} is missing")
    value = attrs[name]
    if isinstance(value, bytes):
        return value.decode("utf-8")
    if not isinstance(value, str):
        raise ValueError(f"attribute {name} is not text")
    return value


# --------------------------------------------------------------------------------------------------
# Atomic files
# --------------------------------------------------------------------------------------------------


@contextlib.contextmanager
def atomic_file(path):
    """Open an HDF5 file for writing under a temporary name; rename it to ``path`` on success.

    The temporary file sits in the same folder (so the rename is atomic), is flushed and synced to
    disk before the rename, and is removed if the block raises.

    Yields
    ------
    h5py.File
    """
    path = Path(path)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    try:
        with h5py.File(tmp, "w") as f:
            yield f
            f.flush()
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()


_TEMPORARY = re.compile(r"^\..+\.h5\.(\d+)\.tmp$")


def remove_stale_temporaries(folder) -> list[Path]:
    """Delete the temporary files that a killed writer left in ``folder``.

    A process killed inside :func:`atomic_file` cannot clean up; its ``.<name>.<pid>.tmp`` file stays
    beside the intact previous file. Files of the calling process are kept.

    Returns
    -------
    list of Path
        The files removed.
    """
    removed = []
    folder = Path(folder)
    if not folder.is_dir():
        return removed
    for entry in folder.iterdir():
        match = _TEMPORARY.match(entry.name)
        if match and int(match.group(1)) != os.getpid() and entry.is_file():
            entry.unlink(missing_ok=True)
            removed.append(entry)
    return removed


# --------------------------------------------------------------------------------------------------
# High level: the schema
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class SavedState:
    """A state file as read back.

    Attributes
    ----------
    path : Path
    kind : str
        ``"state"`` (a finished result) or ``"checkpoint"``.
    state : MPS
    model_text : str
        The model file's text ("" if none was stored).
    overrides : dict of str to str
        The ``--set`` values.
    seed : int or None
    info : dict
        Everything else the writer stored (energy, settings, sweep history, ...).
    rng_state : dict or None
        ``bit_generator.state`` of the run's random generator.
    package_version : str
    format_version : int
    created : str
    """

    path: Path
    kind: str
    state: MPS = field(repr=False)
    model_text: str = field(repr=False)
    overrides: dict
    seed: int | None
    info: dict = field(repr=False)
    rng_state: dict | None = field(repr=False)
    package_version: str
    format_version: int
    created: str

    def model(self):
        """Rebuild the model (:class:`netprobe.model.spec.Model`) from the stored text and overrides.

        Raises
        ------
        StateFileError
            If the file stores no model description.
        """
        if not self.model_text:
            raise StateFileError(
                f"state file {self.path} stores no model description; pass the model explicitly")
        return build_model(parse_spec(self.model_text, path=f"{self.path} (stored model)"), self.overrides)


def save_state(path, state: MPS, *, model_text: str = "", overrides: Mapping[str, str] | None = None,
               seed: int | None = None, kind: str = "state", info: Mapping[str, Any] | None = None,
               rng_state: Mapping | None = None) -> Path:
    """Write a state file atomically (see the module notes for the layout).

    Parameters
    ----------
    path : str or Path
    state : MPS
    model_text : str
        The model file's text.
    overrides : dict, optional
        The ``--set`` values used with it.
    seed : int, optional
    kind : {"state", "checkpoint"}
    info : dict, optional
        JSON-serialisable extras (energy, settings, history).
    rng_state : dict, optional
        ``Generator.bit_generator.state``.

    Returns
    -------
    Path

    Raises
    ------
    NetprobeError
        If ``info`` is not JSON-serialisable or the folder does not exist.
    """
    path = Path(path)
    if kind not in ("state", "checkpoint"):
        raise NetprobeError(f"save_state: kind={kind!r}; use 'state' or 'checkpoint'")
    if not path.parent.is_dir():
        raise NetprobeError(f"save_state: folder {path.parent} does not exist; create it first")
    try:
        info_text = json.dumps(dict(info or {}), allow_nan=True)
        rng_text = "" if rng_state is None else json.dumps(dict(rng_state))
        overrides_text = json.dumps({str(k): str(v) for k, v in (overrides or {}).items()})
    except (TypeError, ValueError) as err:
        raise NetprobeError(f"save_state: info is not JSON-serialisable ({err})") from None
    with atomic_file(path) as f:
        f.attrs["format"] = FORMAT_NAME
        f.attrs["format_version"] = FORMAT_VERSION
        f.attrs["package_version"] = __version__
        f.attrs["kind"] = kind
        f.attrs["created"] = datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds")
        f.attrs["seed"] = json.dumps(None if seed is None else int(seed))
        f.attrs["model_text"] = model_text
        f.attrs["overrides"] = overrides_text
        f.attrs["info"] = info_text
        f.attrs["rng_state"] = rng_text
        write_mps(f.create_group("mps"), state)
    return path


def _text(attrs, name) -> str:
    return _attribute_text(attrs, name)


def _json_attribute(attrs, name: str, kinds: tuple, allow_empty: bool = False):
    text = _text(attrs, name)
    if allow_empty and not text:
        return None
    value = json.loads(text)
    if not isinstance(value, kinds) or isinstance(value, bool):
        raise ValueError(f"attribute {name} holds {type(value).__name__}, the layout has "
                         f"{' or '.join(k.__name__ for k in kinds)}")
    return value


def check_rng_state(state) -> dict:
    """Validate a stored ``bit_generator.state`` by loading it into a fresh generator.

    Raises
    ------
    ValueError
        If it names an unknown bit generator or numpy refuses the state.
    """
    if not isinstance(state, dict) or state.get("bit_generator") not in _BIT_GENERATORS:
        name = state.get("bit_generator") if isinstance(state, dict) else state
        raise ValueError(f"random-generator state names {name!r}, not one of {', '.join(_BIT_GENERATORS)}")
    bitgen = getattr(np.random, state["bit_generator"])()
    try:
        bitgen.state = state
    except (TypeError, ValueError, KeyError, OverflowError) as err:
        raise ValueError(f"random-generator state is malformed ({type(err).__name__}: {err})") from None
    return state


def damaged(path, detail: str) -> StateFileError:
    """The one-line error for a state file that does not fit the layout."""
    return StateFileError(
        f"state file {path} is damaged or incomplete: {' '.join(str(detail).split())}; rerun or restore it "
        "from the last good copy"
    )


def load_state(path) -> SavedState:
    """Read a state file written by :func:`save_state`.

    Raises
    ------
    StateFileError
        If the file is missing, not HDF5, a foreign HDF5 file, of an unsupported format version, or
        damaged; the one-line message names the file and what to do.
    """
    path = Path(path)
    if not path.is_file():
        raise StateFileError(
            f"state file {path} does not exist; give the path of a file written by 'netprobe run'")
    if not h5py.is_hdf5(path):
        raise StateFileError(f"{path} is not an HDF5 file; give a state file written by 'netprobe run'")
    try:
        f = h5py.File(path, "r")
    except OSError as err:
        raise StateFileError(
            f"cannot open state file {path} ({err}); check that it is complete and readable") from None
    with f:
        fmt = f.attrs.get("format")
        fmt = fmt.decode() if isinstance(fmt, bytes) else fmt
        if fmt != FORMAT_NAME:
            raise StateFileError(
                f"{path} is an HDF5 file but not a netprobe state file (no format attribute "
                f"'{FORMAT_NAME}'); give a state file written by 'netprobe run'"
            )
        version = f.attrs.get("format_version")
        try:
            version = int(version)
        except (TypeError, ValueError):
            version = None if version is None else str(version)
        if version not in _READABLE_VERSIONS:
            writer = f.attrs.get("package_version", "unknown")
            writer = writer.decode(errors="replace") if isinstance(writer, bytes) else str(writer)
            raise StateFileError(
                f"state file {path} has format version {version}, but netprobe {__version__} reads "
                f"version(s) {', '.join(map(str, _READABLE_VERSIONS))}; use the netprobe version that "
                f"wrote it (package_version {writer})"
            )
        try:
            if not isinstance(f.get("mps"), h5py.Group):
                raise ValueError("the group /mps is missing")
            state = read_mps(f["mps"])
            kind = _text(f.attrs, "kind")
            if kind not in ("state", "checkpoint"):
                raise ValueError(f"kind {kind!r} is neither 'state' nor 'checkpoint'")
            seed = _json_attribute(f.attrs, "seed", (int, type(None)))
            rng_state = _json_attribute(f.attrs, "rng_state", (dict,), allow_empty=True)
            if rng_state is not None:
                check_rng_state(rng_state)
            return SavedState(
                path=path, kind=kind, state=state, model_text=upgrade_model_text(_text(f.attrs, "model_text")),
                overrides=_json_attribute(f.attrs, "overrides", (dict,)), seed=seed,
                info=_json_attribute(f.attrs, "info", (dict,)), rng_state=rng_state,
                package_version=_text(f.attrs, "package_version"), format_version=int(version),
                created=_text(f.attrs, "created"),
            )
        except (KeyError, ValueError, TypeError, IndexError, OSError, RecursionError, NetprobeError) as err:
            raise damaged(path, err) from None
