"""State files: matrix product states in HDF5, in a versioned layout of our own.

Layout (format ``netprobe-state``, version 1)
-----------------------------------------------
::

    /                       attributes: format = "netprobe-state", format_version = 1,
                            package_version, kind ("state" or "checkpoint"), created (UTC, ISO 8601),
                            seed (JSON: an integer or null), model_text (the model file),
                            overrides (JSON object of the --set values), info (JSON object),
                            rng_state (JSON of numpy's bit_generator.state, or "")
    /mps                    attributes: num_sites, centre (-1: none), site_space, conserve (JSON list),
                            charge_moduli, basis_order
    /mps/site_00000 ...     one block tensor per site (below)

A block tensor is a group with attributes ``charge``, ``charge_moduli``, ``dtype`` and
``directions`` (one per leg), datasets ``leg<i>_charges`` (n_sectors, k) and ``leg<i>_dims``
(n_sectors,) per leg, ``keys`` (n_blocks, n_legs) with the sector indices of every stored block and
``data``: the blocks flattened in C order and concatenated in the order of ``keys``.

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
from netprobe.mps import MPS, SiteBasis
from netprobe.sites import site_space
from netprobe.tensor import BlockTensor, ChargeRule, Leg

__all__ = [
    "FORMAT_NAME",
    "FORMAT_VERSION",
    "SavedState",
    "save_state",
    "load_state",
    "atomic_file",
    "remove_stale_temporaries",
    "write_block_tensor",
    "read_block_tensor",
    "write_mps",
    "read_mps",
]

FORMAT_NAME = "netprobe-state"
FORMAT_VERSION = 1
_READABLE_VERSIONS = (1,)


# --------------------------------------------------------------------------------------------------
# Low level: block tensors and states inside an open HDF5 group
# --------------------------------------------------------------------------------------------------


def write_block_tensor(group: h5py.Group, tensor: BlockTensor) -> None:
    """Write a block tensor into an (empty) HDF5 group."""
    group.attrs["charge"] = np.asarray(tensor.charge, np.int64)
    group.attrs["charge_moduli"] = np.asarray(tensor.rule.moduli, np.int64)
    group.attrs["dtype"] = str(tensor.dtype)
    group.attrs["directions"] = np.array([leg.direction for leg in tensor.legs], np.int64)
    for i, leg in enumerate(tensor.legs):
        group.create_dataset(f"leg{i}_charges", data=np.asarray(leg.charges, np.int64))
        group.create_dataset(f"leg{i}_dims", data=np.asarray(leg.dims, np.int64))
    keys = sorted(tensor.blocks)
    group.create_dataset("keys", data=np.array(keys, np.int64).reshape(len(keys), tensor.ndim))
    data = [np.ascontiguousarray(tensor.blocks[k]).reshape(-1) for k in keys]
    flat = np.concatenate(data) if data else np.zeros(0, tensor.dtype)
    group.create_dataset("data", data=flat.astype(tensor.dtype, copy=False))


def read_block_tensor(group: h5py.Group) -> BlockTensor:
    """Read a block tensor written by :func:`write_block_tensor` (validated on the way in).

    Raises
    ------
    KeyError, ValueError
        For a damaged group; :func:`load_state` turns these into :class:`StateFileError`.
    """
    rule = ChargeRule(tuple(int(m) for m in group.attrs["charge_moduli"]))
    directions = [int(d) for d in group.attrs["directions"]]
    dtype = np.dtype(str(group.attrs["dtype"]))
    legs = [Leg(np.asarray(group[f"leg{i}_charges"][()], np.int64),
                np.asarray(group[f"leg{i}_dims"][()], np.int64), d) for i, d in enumerate(directions)]
    keys = np.asarray(group["keys"][()], np.int64).reshape(-1, len(legs))
    flat = np.asarray(group["data"][()])
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
    return BlockTensor(legs, np.asarray(group.attrs["charge"], np.int64), rule, blocks, dtype=dtype)


def write_mps(group: h5py.Group, state: MPS) -> None:
    """Write a state (tensors, canonical centre and local basis) into an (empty) HDF5 group."""
    basis = state.basis
    group.attrs["num_sites"] = state.num_sites
    group.attrs["centre"] = -1 if state.centre is None else int(state.centre)
    group.attrs["site_space"] = basis.space.name
    group.attrs["conserve"] = json.dumps(list(basis.conserve))
    group.attrs["charge_moduli"] = np.asarray(basis.rule.moduli, np.int64)
    group.attrs["basis_order"] = np.asarray(basis.order, np.int64)
    for i, t in enumerate(state.tensors):
        write_block_tensor(group.create_group(f"site_{i:05d}"), t)


def read_mps(group: h5py.Group) -> MPS:
    """Read a state written by :func:`write_mps`.

    Raises
    ------
    KeyError, ValueError, NetprobeError
        For a damaged group or an unknown site space.
    """
    space = site_space(str(group.attrs["site_space"]))
    basis = SiteBasis.from_space(space, json.loads(group.attrs["conserve"]))
    if not np.array_equal(np.asarray(group.attrs["basis_order"]), basis.order) or \
            tuple(int(m) for m in group.attrs["charge_moduli"]) != basis.rule.moduli:
        raise ValueError("the stored local basis differs from the site space's")
    n = int(group.attrs["num_sites"])
    tensors = [read_block_tensor(group[f"site_{i:05d}"]) for i in range(n)]
    centre = int(group.attrs["centre"])
    return MPS(tensors, basis, centre=None if centre < 0 else centre)


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
        """Rebuild the model (:class:`netprobe.spec.Model`) from the stored text and overrides.

        Raises
        ------
        StateFileError
            If the file stores no model description.
        """
        from netprobe.spec import build_model, parse_spec

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
    value = attrs[name]
    if isinstance(value, bytes):
        return value.decode("utf-8")
    return str(value)


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
        if version is None or int(version) not in _READABLE_VERSIONS:
            writer = _text(f.attrs, "package_version") if "package_version" in f.attrs else "unknown"
            raise StateFileError(
                f"state file {path} has format version {version}, but netprobe {__version__} reads "
                f"version(s) {', '.join(map(str, _READABLE_VERSIONS))}; use the netprobe version that "
                f"wrote it (package_version {writer})"
            )
        try:
            state = read_mps(f["mps"])
            rng_text = _text(f.attrs, "rng_state")
            return SavedState(
                path=path, kind=_text(f.attrs, "kind"), state=state, model_text=_text(f.attrs, "model_text"),
                overrides=dict(json.loads(_text(f.attrs, "overrides"))),
                seed=json.loads(_text(f.attrs, "seed")), info=dict(json.loads(_text(f.attrs, "info"))),
                rng_state=json.loads(rng_text) if rng_text else None,
                package_version=_text(f.attrs, "package_version"), format_version=int(version),
                created=_text(f.attrs, "created"),
            )
        except (KeyError, ValueError, TypeError, NetprobeError) as err:
            raise StateFileError(
                f"state file {path} is damaged or incomplete ({' '.join(str(err).split())}); rerun or "
                "restore it from the last good copy"
            ) from None
