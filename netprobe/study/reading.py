"""Reading study files: the TOML tables, the grid axes, the checks against the model and its engines, and the
:class:`netprobe.study.description.StudyDescription` they produce (:func:`parse_study`, :func:`load_study`).
"""

from __future__ import annotations

import math
import numbers
from dataclasses import fields
from pathlib import Path

import numpy as np

from netprobe.errors import NetprobeError, SpecError
from netprobe.model.limits import check_grid_size
from netprobe.model.spec import LATTICE_KEYS, find_model, parse_spec
from netprobe.model.tomlio import check_keys, main_table, parse_toml, read_text
from netprobe.engines.dmrg import SweepSettings
from netprobe.study.description import (
    ENGINES, ExecutorSettings, GridAxis, StudyDescription, StudyPoint,
    VerdictSettings, _AXIS_KEYS, _DECIMALS, _DEFAULT_REGION, _LADDER_ONLY,
    _MAX_AXES, _MEASURE_KEYS, _STUDY_KEYS, _SWEEP_KEYS, _TOP_KEYS,
    _format_value, _swept_names, _where, find_study, parse_probe,
)

__all__ = [
    "parse_study",
    "load_study",
]

def _is_number(value) -> bool:
    return isinstance(value, numbers.Real) and not isinstance(value, bool) and math.isfinite(value)


def _axis(name: str, entry, where: str) -> GridAxis:
    what = f"[grid] {name}"
    if isinstance(entry, list):
        entry = {"values": entry}
    check_keys(entry, _AXIS_KEYS, where, what)
    if "values" in entry:
        if set(entry) - {"values"}:
            raise SpecError(f"{where}: {what}: give either values = [...] or start, stop, num, not both")
        values = entry["values"]
        if not isinstance(values, list) or not all(_is_number(v) for v in values):
            raise SpecError(f"{where}: {what}: values must be a list of numbers, e.g. values = [0.5, 1.0]")
        out = tuple(values)
    else:
        missing = [k for k in ("start", "stop", "num") if k not in entry]
        if missing:
            raise SpecError(
                f"{where}: {what} needs start, stop and num (missing: {', '.join(missing)}), or "
                "values = [...]"
            )
        start, stop, num = entry["start"], entry["stop"], entry["num"]
        if not (_is_number(start) and _is_number(stop)):
            raise SpecError(f"{where}: {what}: start and stop must be numbers")
        if isinstance(num, bool) or not isinstance(num, numbers.Integral) or num < 0:
            raise SpecError(f"{where}: {what}: num = {num!r} must be a whole number of points")
        check_grid_size(int(num), where=f"{where}: {what}")
        if num == 1 and start != stop:
            raise SpecError(f"{where}: {what}: num = 1 with start != stop; give num >= 2 or values = [x]")
        out = tuple(float(round(v, _DECIMALS)) for v in np.linspace(float(start), float(stop), int(num)))
    if not out:
        raise SpecError(f"{where}: the grid is empty: {what} has no values; give values = [...] or num >= 1")
    if len(set(out)) != len(out):
        raise SpecError(f"{where}: {what} lists a value twice; give distinct values")
    if name in LATTICE_KEYS and LATTICE_KEYS[name] is int:
        if not all(float(v).is_integer() and v >= 1 for v in out):
            raise SpecError(f"{where}: {what}: {name} takes positive whole numbers, got {list(out)}")
        out = tuple(int(v) for v in out)
    elif name in LATTICE_KEYS and LATTICE_KEYS[name] is str:
        raise SpecError(f"{where}: {what}: '{name}' is not numeric and cannot be swept; set it in [set]")
    return GridAxis(name, out)


def _fixed_value(key, value, where) -> str:
    if isinstance(value, bool) or not isinstance(value, (numbers.Real, str)):
        raise SpecError(f"{where}: [set] {key} must be a number or a string expression")
    return value if isinstance(value, str) else _format_value(value)


def parse_study(text: str, *, path: str = "") -> StudyDescription:
    """Parse and check the layout of a study file (cheap: no model is built, see ``StudyDescription.check``).

    Parameters
    ----------
    text : str
        The study file.
    path : str
        Its path (for messages, and as the base of a relative model path).

    Returns
    -------
    StudyDescription

    Raises
    ------
    SpecError
        For malformed TOML, an unknown key, an unknown engine or probe, a grid parameter that is not a
        parameter of the model, an empty grid, or a bad ladder or executor setting.

    """
    where = _where(path)
    raw = parse_toml(text, where)
    study = main_table(raw, _TOP_KEYS, "study", _STUDY_KEYS, where, "name, model and engine")
    for key in ("name", "model", "engine"):
        if not isinstance(study.get(key), str) or not study[key].strip():
            raise SpecError(f"{where}: [study] needs a string '{key}'")
    name = study["name"].strip()
    if not all(ch.isalnum() or ch in "-_." for ch in name):
        raise SpecError(f"{where}: [study] name '{name}' may hold only letters, digits, '-', '_' and '.'")
    engine = study["engine"]
    if engine not in ENGINES:
        raise SpecError(f"{where}: unknown engine '{engine}'; valid engines: {', '.join(ENGINES)}")
    seed = study.get("seed", 0)
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise SpecError(f"{where}: [study] seed = {seed!r} must be a non-negative integer")
    warm = study.get("warm_start", False)
    if not isinstance(warm, bool):
        raise SpecError(f"{where}: [study] warm_start must be true or false")

    model_path = _resolve_model(study["model"], path, where)
    try:
        model_text = read_text(model_path, "model")
    except SpecError as err:
        raise SpecError(f"{where}: {err}") from None
    spec = parse_spec(model_text, path=str(model_path))
    parameters = list(spec.parameters)

    fixed_raw = raw.get("set", {})
    check_keys(fixed_raw, set(parameters), where, f"[set] (parameters of model '{spec.name}')")
    fixed = {k: _fixed_value(k, v, where) for k, v in fixed_raw.items()}

    axes: tuple[GridAxis, ...] = ()
    points: list[StudyPoint] = []
    if "grid" in raw and "point" in raw:
        raise SpecError(f"{where}: give either [grid] or [[point]] entries, not both")
    if "grid" in raw:
        grid = raw["grid"]
        if not isinstance(grid, dict):
            raise SpecError(f"{where}: [grid] must be a table of parameter = {{ start, stop, num }} entries")
        if not grid:
            raise SpecError(
                f"{where}: the grid is empty; sweep one or two parameters, e.g. h = {{ start = 0.5, "
                "stop = 1.5, num = 11 }"
            )
        if len(grid) > _MAX_AXES:
            raise SpecError(
                f"{where}: [grid] sweeps {len(grid)} parameters ({', '.join(grid)}); a grid sweeps one "
                "or two (use [[point]] entries for other sets)"
            )
        for key in grid:
            _check_parameter(key, parameters, spec.name, where, "[grid]")
            if key in fixed:
                raise SpecError(f"{where}: '{key}' is both swept in [grid] and fixed in [set]; keep one")
        axes = tuple(_axis(k, v, where) for k, v in grid.items())
        check_grid_size(math.prod(len(a.values) for a in axes), where=f"{where}: [grid]")
        for index in np.ndindex(*(len(a.values) for a in axes)):
            values = {a.name: a.values[i] for a, i in zip(axes, index)}
            points.append(StudyPoint(len(points), values, tuple(int(i) for i in index)))
    elif "point" in raw:
        entries = raw["point"]
        if not isinstance(entries, list) or not entries:
            raise SpecError(f"{where}: the list of points is empty; add [[point]] entries")
        for k, entry in enumerate(entries):
            if not isinstance(entry, dict) or not entry:
                raise SpecError(f"{where}: [[point]] #{k + 1} must set at least one parameter")
            values = {}
            for key, value in entry.items():
                _check_parameter(key, parameters, spec.name, where, f"[[point]] #{k + 1}")
                if key in fixed:
                    raise SpecError(
                        f"{where}: '{key}' is both set in [[point]] #{k + 1} and fixed in [set]; keep one"
                    )
                if not _is_number(value):
                    raise SpecError(f"{where}: [[point]] #{k + 1}: {key} must be a number")
                values[key] = value
            points.append(StudyPoint(k, values, None))
        labels = [p.label for p in points]
        if len(set(labels)) != len(labels):
            raise SpecError(f"{where}: [[point]] entries repeat a point; give each point once")
    else:
        raise SpecError(f"{where}: the grid is empty: no [grid] and no [[point]] entries; add one")
    swept = _swept_names(axes, points)

    ladder_raw = raw.get("ladder", {})
    check_keys(ladder_raw, _LADDER_ONLY | _SWEEP_KEYS, where, "[ladder]")
    if engine == "dmrg":
        chis = ladder_raw.get("bond_dimensions")
        if not isinstance(chis, list) or not chis:
            raise SpecError(
                f"{where}: engine dmrg needs [ladder] bond_dimensions = [...], e.g. [32, 64, 128]"
            )
        if not all(isinstance(c, int) and not isinstance(c, bool) and c >= 1 for c in chis):
            raise SpecError(f"{where}: [ladder] bond_dimensions must be positive integers, got {chis}")
        if any(b <= a for a, b in zip(chis, chis[1:])):
            raise SpecError(f"{where}: [ladder] bond_dimensions {chis} must increase; sort them")
        ladder = tuple(chis)
    else:
        ladder = (0,)
    sweep_settings = {k: v for k, v in ladder_raw.items() if k in _SWEEP_KEYS}
    variance = ladder_raw.get("variance", True)
    if not isinstance(variance, bool):
        raise SpecError(f"{where}: [ladder] variance must be true or false")
    if engine == "dmrg":
        _check_sweep_settings(sweep_settings, ladder, where)

    measure = raw.get("measure", {})
    check_keys(measure, _MEASURE_KEYS, where, "[measure]")
    if "region" in measure and "regions" in measure:
        raise SpecError(f'{where}: [measure] takes region = "..." or regions = {{ ... }}, not both')
    regions: dict[str, str] = {}
    if "region" in measure:
        if not isinstance(measure["region"], str):
            raise SpecError(f'{where}: [measure] region must be a layout string such as "sectors:radius=3"')
        regions[_DEFAULT_REGION] = measure["region"]
    elif "regions" in measure:
        if not isinstance(measure["regions"], dict) or not all(
            isinstance(v, str) for v in measure["regions"].values()
        ):
            raise SpecError(f'{where}: [measure] regions must be a table of name = "layout" entries')
        for key in measure["regions"]:
            if not key.isidentifier():
                raise SpecError(f"{where}: region name '{key}' must be a plain word (letters, digits, _)")
        regions = dict(measure["regions"])
    probe_texts = measure.get("probes", ["energy"])
    if not isinstance(probe_texts, list) or not probe_texts:
        raise SpecError(f'{where}: [measure] probes must be a non-empty list, e.g. ["energy", "J"]')
    probes = tuple(parse_probe(t, regions, engine, where) for t in probe_texts)
    if len({p.text for p in probes}) != len(probes):
        raise SpecError(f"{where}: [measure] probes lists a probe twice")

    exec_raw = raw.get("executor", {})
    check_keys(exec_raw, {f.name for f in fields(ExecutorSettings)}, where, "[executor]")
    verdict_raw = raw.get("verdicts", {})
    check_keys(verdict_raw, {f.name for f in fields(VerdictSettings)}, where, "[verdicts]")
    try:
        executor = ExecutorSettings(**exec_raw)
        verdicts = VerdictSettings(**verdict_raw)
    except SpecError as err:
        raise SpecError(f"{where}: {err}") from None
    return StudyDescription(
        name=name,
        text=str(study.get("description", "")),
        path=path,
        model=study["model"],
        model_text=model_text,
        model_path=str(model_path),
        engine=engine,
        seed=seed,
        warm_start=warm,
        fixed=fixed,
        axes=axes,
        points=tuple(points),
        swept=swept,
        ladder=ladder,
        sweep_settings=sweep_settings,
        variance=variance,
        regions=regions,
        probes=probes,
        executor=executor,
        verdicts=verdicts,
    )


def _check_parameter(key, parameters, model_name, where, what):
    if key not in parameters:
        raise SpecError(
            f"{where}: {what} parameter '{key}' is not a parameter of model '{model_name}'; valid: "
            f"{', '.join(parameters)}"
        )


def _check_sweep_settings(settings, ladder, where):
    try:
        SweepSettings(bond_dimension=ladder[0], **settings)
    except NetprobeError as err:
        raise SpecError(f"{where}: [ladder]: {' '.join(str(err).split())}") from None
    except TypeError as err:
        raise SpecError(f"{where}: [ladder]: {err}") from None


def _resolve_model(model: str, path: str, where: str) -> Path:
    if path:
        local = Path(path).parent / model
        if local.is_file():
            return local.resolve()
    try:
        return find_model(model).resolve()
    except SpecError as err:
        raise SpecError(f"{where}: {err}") from None


def load_study(name_or_path: str) -> StudyDescription:
    """Read and parse a study file (a path, or the name of a bundled study)."""
    path = find_study(name_or_path)
    text = read_text(path, "study")
    return parse_study(text, path=str(path))
