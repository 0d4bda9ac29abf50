"""Model descriptions: TOML files of our own layout, parsed into lattice, site space and terms.

Layout
------
::

    [model]
    name = "haldane"                  # required
    description = "..."               # one line, shown by `netprobe models`
    site = "fermion"                  # a registered site space
    conserved = ["N"]                  # conserved charges used to block the problem (may be [])

    [parameters]                      # every entry can be overridden with --set name=value
    lattice = "honeycomb"             # lattice keys: lattice, geometry, orientation, length,
    length = 4                        #   circumference, flux (per unit cell, in flux quanta),
    circumference = 3                 #   twist (phase around the cylinder)
    t = 1.0
    phi = "pi/2"                      # numbers or expressions in earlier parameters

    [sector]                          # target value of each conserved charge, an expression in
    N = "sites / 2"                   #   the parameters and `sites` (number of sites)

    [z2_loops]                        # optional: Z2 loops around the cylinder on one column, read by the
    charge_ops = "X"                  #   cut diagnostics (netprobe edge): the product of charge_ops over the
    charge_sublattice = 0             #   sites of charge_sublattice measures the Z2 charge of the left part,
    flux_ops = "Z"                    #   that of flux_ops over flux_sublattice the Z2 flux through the
    flux_sublattice = 1               #   cylinder; reported as sector labels (netprobe.pipeline.loops)

    [[term]]
    on = "nn"                         # a bond family of the lattice
    ops = "cdag c"                    # a sum of products, one operator per bond member, see below
    coupling = "-t"                   # expression; on the `sites` family also x, y, sublattice, eps;
                                      #   on every family `members` (members present on the bond)
    conjugate = true                  # also add the Hermitian conjugate (default false)
    peierls = true                    # apply flux/twist phases to charge-moving pairs (default true)

``ops`` is a sum of products separated by ``+`` or ``-``; a product may start with a factor
``number*`` or ``(expression)*``; its operator names follow in member order, or with an explicit
member ``name@k``; ``a.b`` is the on-site product of ``a`` and ``b``. Example:
``"0.5*Sp Sm + 0.5*Sm Sp"``, ``"cdag_up@1 c_up@0"``.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from netprobe.model import expr
from netprobe.errors import ExpressionError, NetprobeError, SpecError
from netprobe.model.lattice import Lattice, build_lattice
from netprobe.model.limits import check_model_size, estimate_model_size
from netprobe.model.sites import SiteSpace, operator_charge_change, site_space
from netprobe.model.terms import Hamiltonian, Term
from netprobe.model.tomlio import check_keys, describe_path_problem, main_table, parse_toml, read_text

__all__ = ["ModelSpec", "Model", "load_spec", "parse_spec", "parse_overrides", "models_directory",
           "find_model", "list_models", "find_toml", "bundled_files", "build_model", "load_model", "check_size",
           "LATTICE_KEYS"]

LATTICE_KEYS = {"lattice": str, "geometry": str, "orientation": str, "length": int, "circumference": int,
                "flux": float, "twist": float}
_MODEL_KEYS = {"name", "description", "site", "conserved", "source"}
_TERM_KEYS = {"on", "ops", "coupling", "conjugate", "peierls"}
_TOP_KEYS = {"model", "parameters", "sector", "term", "z2_loops"}
_LOOP_KEYS = {"charge_ops": str, "charge_sublattice": int, "flux_ops": str, "flux_sublattice": int}
_SITE_VARIABLES = ("x", "y", "sublattice", "eps")
_NON_FINITE = {"nan", "inf", "infinity", "NaN", "Inf", "Infinity"}


def models_directory() -> Path:
    """The folder of bundled model files (``models/`` beside the package)."""
    return Path(__file__).resolve().parents[2] / "models"


def bundled_files(folder: Path) -> list[Path]:
    """TOML files in a folder, sorted by name (empty if the folder is missing)."""
    return sorted(folder.glob("*.toml")) if folder.is_dir() else []


def find_toml(name_or_path: str, folder: Path, what: str) -> Path:
    """Resolve a path to a TOML file, or the name of a bundled ``what`` (model, study) in ``folder``.

    Raises
    ------
    SpecError
        If neither exists; the message lists the bundled names.
    """
    path = Path(name_or_path)
    if path.is_file():
        return path
    bundled = folder / f"{name_or_path}.toml"
    if bundled.is_file():
        return bundled
    problem = describe_path_problem(path)
    if problem is not None:
        raise SpecError(
            f"{what} '{name_or_path}' {problem}; give the path of a {what} file (TOML) or a bundled {what}")
    names = ", ".join(p.stem for p in bundled_files(folder)) or "none"
    raise SpecError(f"{what} '{name_or_path}' not found: give a {what} file path or a bundled {what} ({names})")


def list_models() -> list[Path]:
    """Bundled model files, sorted by name."""
    return bundled_files(models_directory())


def find_model(name_or_path: str) -> Path:
    """Resolve a model argument: a path to a TOML file, or the name of a bundled model."""
    return find_toml(name_or_path, models_directory(), "model")


@dataclass(frozen=True)
class TermSpec:
    """One ``[[term]]`` entry, validated but not yet placed on a lattice."""

    index: int
    on: str
    products: tuple[tuple[Any, tuple[tuple[str, int | None], ...]], ...]
    coupling: expr.Expression
    conjugate: bool
    peierls: bool
    text: str

    @property
    def label(self) -> str:
        return f"[[term]] #{self.index + 1} (on {self.on}: {self.text})"


@dataclass(frozen=True)
class ModelSpec:
    """A parsed model file: raw parameters and validated term entries."""

    name: str
    description: str
    source: str
    site: str
    conserved: tuple[str, ...]
    parameters: Mapping[str, Any]
    sector: Mapping[str, expr.Expression]
    terms: tuple[TermSpec, ...]
    path: str = ""
    text: str = field(default="", repr=False)
    z2_loops: Mapping[str, Any] | None = None


def _where(path: str) -> str:
    return f"model file {path}" if path else "model description"


_PRODUCT_SPLIT = re.compile(r"\s*([+-])\s*")


def _split_sum(text: str):
    """Split at top-level + and - (outside parentheses); yields (sign, chunk)."""
    depth, start, sign, out = 0, 0, 1, []
    for k, ch in enumerate(text):
        if ch == "(":
            depth += 1
        elif ch == ")":
            depth -= 1
        elif ch in "+-" and depth == 0:
            # a sign inside a number exponent like 1e-3 is not a separator
            if k > 0 and text[k - 1] in "eE" and k > 1 and (text[k - 2].isdigit() or text[k - 2] == "."):
                continue
            chunk = text[start:k].strip()
            if chunk:
                out.append((sign, chunk))
            elif out or k > 0 and text[:k].strip():
                pass
            sign = 1 if ch == "+" else -1
            start = k + 1
    chunk = text[start:].strip()
    if chunk:
        out.append((sign, chunk))
    return out


def _parse_ops(text: str, where: str):
    """Parse an ``ops`` string into (factor, ((name, member or None), ...)) products."""
    if not isinstance(text, str) or not text.strip():
        raise SpecError(f"{where}: 'ops' must be a non-empty string such as \"cdag c\" or \"Sz Sz\"")
    products = []
    for sign, chunk in _split_sum(text):
        factor: Any = sign
        body = chunk
        match = re.match(r"^(\([^*]*\)|[0-9.]+(?:[eE][+-]?[0-9]+)?j?)\s*\*\s*(.*)$", chunk)
        if match:
            try:
                factor = (sign, expr.parse(match.group(1)))
            except ExpressionError as err:
                raise SpecError(f"{where}: bad factor in ops '{text}': {err}") from None
            body = match.group(2)
        names = []
        for token in body.split():
            name, _, member = token.partition("@")
            if member and not member.isdigit():
                raise SpecError(f"{where}: bad member index in '{token}'; write name@k with k = 0, 1, ...")
            names.append((name, int(member) if member else None))
        if not names:
            raise SpecError(f"{where}: empty product in ops '{text}'")
        explicit = [m is not None for _, m in names]
        if any(explicit) and not all(explicit):
            raise SpecError(f"{where}: ops '{text}' mixes name@k and positional operators; use one style")
        products.append((factor, tuple(names)))
    if not products:
        raise SpecError(f"{where}: 'ops' has no operator product")
    return tuple(products)


def parse_spec(text: str, *, path: str = "") -> ModelSpec:
    """Parse and validate model-file text.

    Raises
    ------
    SpecError
        For malformed TOML, unknown keys, missing entries or malformed expressions.
    """
    where = _where(path)
    raw = parse_toml(text, where)
    model = main_table(raw, _TOP_KEYS, "model", _MODEL_KEYS, where, "name and site")
    for key in ("name", "site"):
        if not isinstance(model.get(key), str):
            raise SpecError(f"{where}: [model] needs a string '{key}'")
    conserved = model.get("conserved", [])
    if not isinstance(conserved, list) or not all(isinstance(c, str) for c in conserved):
        raise SpecError(f"{where}: [model] conserved must be a list of charge names, e.g. [\"N\"] or []")
    params = raw.get("parameters", {})
    if not isinstance(params, dict):
        raise SpecError(f"{where}: [parameters] must be a table")
    for key in ("lattice", "length", "circumference"):
        if key not in params:
            raise SpecError(f"{where}: [parameters] needs '{key}'")
    for key, value in params.items():
        if isinstance(value, (dict, list)) or isinstance(value, bool):
            raise SpecError(f"{where}: parameter '{key}' must be a number or a string expression")
        if key in expr.RESERVED_NAMES:
            raise SpecError(f"{where}: parameter name '{key}' is reserved for a constant or function")
        if key in _SITE_VARIABLES or key == "sites":
            raise SpecError(f"{where}: parameter name '{key}' is reserved for a site variable; rename it")
    sector_raw = raw.get("sector", {})
    if not isinstance(sector_raw, dict):
        raise SpecError(f"{where}: [sector] must be a table of charge = value")
    sector = {}
    for key, value in sector_raw.items():
        if key not in conserved:
            raise SpecError(
                f"{where}: [sector] names charge '{key}' that is not conserved; conserved: {', '.join(conserved) or 'none'}"
            )
        sector[key] = _as_expression(value, where, f"[sector] {key}")
    missing = [c for c in conserved if c not in sector]
    if missing:
        raise SpecError(f"{where}: [sector] needs a value for conserved charge(s) {', '.join(missing)}")
    terms_raw = raw.get("term", [])
    if not isinstance(terms_raw, list) or not terms_raw:
        raise SpecError(f"{where}: no [[term]] entries; a model needs at least one term")
    terms = []
    for index, entry in enumerate(terms_raw):
        label = f"{where}: [[term]] #{index + 1}"
        if not isinstance(entry, dict):
            raise SpecError(
                f"{label} is {entry!r}, not a table; write each term as [[term]] with on, ops, coupling")
        check_keys(entry, _TERM_KEYS, where, f"[[term]] #{index + 1}")
        for key in ("on", "ops"):
            if key not in entry:
                raise SpecError(f"{label} needs '{key}'")
        coupling = _as_expression(entry.get("coupling", 1.0), where, f"[[term]] #{index + 1} coupling")
        for key in ("conjugate", "peierls"):
            if key in entry and not isinstance(entry[key], bool):
                raise SpecError(f"{label}: '{key}' must be true or false")
        terms.append(TermSpec(index, str(entry["on"]), _parse_ops(entry["ops"], label), coupling,
                              bool(entry.get("conjugate", False)), bool(entry.get("peierls", True)),
                              str(entry["ops"])))
    return ModelSpec(
        name=model["name"], description=str(model.get("description", "")), source=str(model.get("source", "")),
        site=model["site"], conserved=tuple(conserved), parameters=dict(params), sector=sector,
        terms=tuple(terms), path=path, text=text, z2_loops=_parse_loops(raw.get("z2_loops"), where),
    )


def _parse_loops(table, where) -> dict | None:
    """The optional ``[z2_loops]`` table: all four keys, operator names and sublattice indices."""
    if table is None:
        return None
    check_keys(table, set(_LOOP_KEYS), where, "[z2_loops]")
    out = {}
    for key, kind in _LOOP_KEYS.items():
        value = table.get(key)
        if isinstance(value, bool) or not isinstance(value, kind) or (kind is int and value < 0):
            what = "an operator name such as \"X\"" if kind is str else "a sublattice index (0, 1, ...)"
            raise SpecError(f"{where}: [z2_loops] needs '{key}' as {what}")
        out[key] = value
    return out


def _as_expression(value, where, what) -> expr.Expression:
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise SpecError(f"{where}: {what} must be a number or an expression string")
    try:
        return expr.parse(str(value))
    except ExpressionError as err:
        raise SpecError(f"{where}: {what}: {err}") from None


def load_spec(name_or_path: str) -> ModelSpec:
    """Read and parse a model file (a path, or the name of a bundled model)."""
    path = find_model(name_or_path)
    return parse_spec(read_text(path, "model"), path=str(path))


def parse_overrides(items) -> dict[str, str]:
    """Turn ``["name=value", ...]`` from ``--set`` into a dict, rejecting malformed items."""
    out = {}
    for item in items or ():
        name, sep, value = item.partition("=")
        name, value = name.strip(), value.strip()
        if not sep or not name or not value:
            raise SpecError(f"--set expects name=value, got '{item}'")
        out[name] = value
    return out


@dataclass(frozen=True, eq=False)
class Model:
    """A model placed on its lattice: resolved parameters, lattice, site space and Hamiltonian."""

    spec: ModelSpec
    parameters: Mapping[str, Any]
    lattice: Lattice
    space: SiteSpace
    hamiltonian: Hamiltonian

    @property
    def name(self) -> str:
        return self.spec.name

    @property
    def num_sites(self) -> int:
        return self.lattice.num_sites

    def numeric_parameters(self) -> dict[str, Any]:
        """Parameters as JSON-friendly values (complex numbers as [re, im])."""
        out = {}
        for key, value in self.parameters.items():
            if isinstance(value, complex):
                out[key] = [value.real, value.imag]
            elif isinstance(value, (np.integer, np.floating)):
                out[key] = value.item()
            else:
                out[key] = value
        return out


def _resolve_parameters(spec: ModelSpec, overrides: Mapping[str, str]) -> dict[str, Any]:
    where = _where(spec.path)
    raw = dict(spec.parameters)
    for key, value in overrides.items():
        if key not in raw:
            valid = ", ".join(raw)
            raise SpecError(f"--set {key}=...: model '{spec.name}' has no parameter '{key}'; valid: {valid}")
        raw[key] = value
    resolved: dict[str, Any] = {}
    for key, kind in LATTICE_KEYS.items():
        if key not in raw:
            continue
        value = raw[key]
        if kind is str:
            resolved[key] = str(value)
        elif kind is int:
            if isinstance(value, str):
                try:
                    value = int(value)
                except ValueError:
                    raise SpecError(f"{where}: {key} must be a positive integer, got '{value}'") from None
            if isinstance(value, float) and value.is_integer():
                value = int(value)
            if not isinstance(value, int) or value < 1:
                raise SpecError(f"{where}: {key} must be a positive integer, got {value!r}; use --set {key}=N")
            resolved[key] = value
    pending = {k: v for k, v in raw.items() if k not in LATTICE_KEYS or LATTICE_KEYS[k] is float}
    # numeric parameters may refer to earlier-resolved ones; resolve in dependency order
    while pending:
        progress = False
        for key in list(pending):
            expression = _as_expression(pending[key], where, f"parameter '{key}'")
            if expression.names - set(resolved):
                continue
            try:
                resolved[key] = expression.evaluate({k: v for k, v in resolved.items()
                                                     if isinstance(v, (int, float, complex))})
            except ExpressionError as err:
                raise SpecError(f"{where}: parameter '{key}': {err}") from None
            del pending[key]
            progress = True
        if not progress:
            key = next(iter(pending))
            expression = _as_expression(pending[key], where, f"parameter '{key}'")
            unknown = sorted(expression.names - set(resolved))
            if set(unknown) <= _NON_FINITE:
                raise SpecError(
                    f"{where}: parameter '{key}' = {pending[key]} is not a finite number; give a finite value")
            raise SpecError(
                f"{where}: parameter '{key}' refers to {', '.join(unknown)}, which is not a parameter "
                "(or the references form a cycle); define it in [parameters]"
            )
    for key in ("flux", "twist"):
        if key in resolved and isinstance(resolved[key], complex):
            raise SpecError(f"{where}: {key} must be real, got {resolved[key]}")
    return resolved


def _numeric_env(parameters: Mapping[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in parameters.items() if isinstance(v, (int, float, complex)) and k not in
            ("length", "circumference")} | {"length": parameters["length"], "circumference": parameters["circumference"]}


def build_model(spec: ModelSpec, overrides: Mapping[str, str] | None = None, *,
                memory_budget: int | None = None) -> Model:
    """Place a model on its lattice with the given ``--set`` overrides.

    Parameters
    ----------
    spec : ModelSpec
    overrides : mapping of str to str, optional
        The ``--set`` values.
    memory_budget : int, optional
        Bytes the assembly may use (default :func:`netprobe.rdm.default_memory_budget`); the size is
        estimated before the lattice is built.

    Raises
    ------
    NetprobeError
        Any problem with the description, the lattice, an operator, the sector or Hermiticity.
    MemoryBudgetError
        If the estimated size of the model exceeds the budget.
    """
    where = _where(spec.path)
    params = _resolve_parameters(spec, overrides or {})
    check_size(spec, params, memory_budget=memory_budget)
    lattice = build_lattice(
        params["lattice"], length=params["length"], circumference=params["circumference"],
        geometry=params.get("geometry", "cylinder"), orientation=params.get("orientation", "zigzag"),
    )
    space = site_space(spec.site)
    space.charge_values(spec.conserved)  # validates the charge names
    env = _numeric_env(params)
    flux = float(np.real(params.get("flux", 0.0)))
    twist = float(np.real(params.get("twist", 0.0)))
    if lattice.geometry == "torus" and flux != 0.0:
        raise SpecError(f"{where}: a uniform flux is only supported on cylinders and strips; use geometry = \"cylinder\"")
    terms: list[Term] = []
    conjugated: set[str] = set()
    charge_changes: dict[str, int | None] = {}  # flux-charge change of each operator name, for Peierls phases
    for entry in spec.terms:
        bonds = lattice.family(entry.on)
        couplings: dict[int, Any] = {}  # without site variables a coupling depends on the member count only
        uses_site_vars = bool(entry.coupling.names & set(_SITE_VARIABLES))
        if uses_site_vars and entry.on != "sites":
            raise SpecError(
                f"{where}: {entry.label}: site variables ({', '.join(_SITE_VARIABLES)}) are only defined on the "
                "'sites' family"
            )
        for factor, names in entry.products:
            for name, _ in names:
                space.operator(name)  # unknown operators fail here, before any bond
        # per entry, not per bond: the factors depend on the parameters only, the placement of the
        # operators on the members of a bond only on which members it has (its slots)
        factors = None
        placements: dict[tuple[int, ...], tuple] = {}
        used_site_vars = sorted(entry.coupling.names & set(_SITE_VARIABLES)) if uses_site_vars else []
        if uses_site_vars:  # (only on the sites family, checked above)
            # plain Python numbers, as float() / int() of the array entries give them
            site_x = lattice.positions[:, 0].tolist()
            site_y = lattice.positions[:, 1].tolist()
            site_sub = lattice.sublattice.tolist()
        phases = None  # Peierls phases of the family's bonds, on first need
        peierls_factors: dict[tuple, complex] = {}  # exp(i q A) by the exact values of q and A
        peierls = entry.peierls and bool(flux or twist) and space.flux_charge
        for bond_index, bond in enumerate(bonds):
            if uses_site_vars:
                site = bond.sites[0]
                values = {"x": site_x[site], "y": site_y[site], "sublattice": site_sub[site],
                          "eps": 1 - 2 * (site_sub[site] % 2)}
                # the coupling depends on the values of the site variables it uses (and the member count)
                key = (len(bond.sites), *(repr(values[n]) for n in used_site_vars))
                coupling = couplings.get(key)
                if coupling is None:
                    local_env = dict(env)
                    local_env["members"] = len(bond.sites)
                    local_env.update(values)
                    try:
                        coupling = entry.coupling.evaluate(local_env)
                    except ExpressionError as err:
                        raise SpecError(f"{where}: {entry.label}: {err}") from None
                    couplings[key] = coupling
            else:
                coupling = couplings.get(len(bond.sites))
                if coupling is None:
                    local_env = dict(env)
                    local_env["members"] = len(bond.sites)  # fewer than the family's arity where an open end cuts it
                    if entry.on == "sites":
                        site = bond.sites[0]
                        sub = int(lattice.sublattice[site])
                        local_env.update(x=float(lattice.positions[site, 0]), y=float(lattice.positions[site, 1]),
                                         sublattice=sub, eps=1 - 2 * (sub % 2))
                    try:
                        coupling = entry.coupling.evaluate(local_env)
                    except ExpressionError as err:
                        raise SpecError(f"{where}: {entry.label}: {err}") from None
                    couplings[len(bond.sites)] = coupling
            if coupling == 0:
                continue
            if factors is None:
                factors = [_evaluate_factor(factor, env, where, entry) for factor, _ in entry.products]
            slots = bond.slots
            placement = placements.get(slots)
            if placement is None:
                placement = placements[slots] = _place_operators(entry, bond, where, space if peierls else None,
                                                                 charge_changes)
            origin = f"{entry.label} on sites {bond.sites}"
            for factor_value, (names, members, charges) in zip(factors, placement):
                coeff = factor_value * coupling
                ops = tuple((bond.sites[k], name) for k, name in members)
                if peierls and charges is not None:
                    if not charges:
                        coeff *= 1.0  # as the factor of a pair that moves no flux charge (keeps zero signs alike)
                    else:
                        # ordered as the bond is: the charge raised at member 0, lowered at member 1
                        q0 = charges[0] if members[0][0] == 0 else charges[1]
                        if phases is None:
                            phases = lattice.peierls_phases(bonds, flux=flux, twist=twist)
                        phase = phases[bond_index]
                        key = (q0, phase, math.copysign(1.0, phase))  # the sign of a zero matters below
                        value = peierls_factors.get(key)
                        if value is None:
                            value = peierls_factors[key] = complex(np.exp(1j * q0 * phase))
                        coeff *= value
                terms.append(Term(coeff, ops, origin))
                if entry.conjugate:
                    conjugated.add(origin)
    sector = _resolve_sector(spec, params, lattice.num_sites, space)
    try:
        ham = Hamiltonian.from_terms(lattice, space, terms, add_conjugate=conjugated,
                                     conserved=spec.conserved, sector=sector)
    except NetprobeError as err:
        raise type(err)(f"{where}: {err}") from None
    if not ham.products:
        raise SpecError(f"{where}: every term vanishes on this lattice (check the bond families and couplings)")
    ham.check_hermitian()
    return Model(spec, params, lattice, space, ham)


def check_size(spec: ModelSpec, params: Mapping[str, Any], *, memory_budget: int | None = None) -> None:
    """Estimate the model's size from resolved parameters and refuse it above the memory budget.

    Raises
    ------
    MemoryBudgetError
        With the estimate and the largest length that fits.
    """
    families: dict[str, int] = {}
    for entry in spec.terms:
        families[entry.on] = families.get(entry.on, 0) + len(entry.products) * (2 if entry.conjugate else 1)
    length, circumference = params["length"], params["circumference"]
    size = estimate_model_size(params["lattice"], length=length, circumference=circumference,
                               geometry=params.get("geometry", "cylinder"),
                               orientation=params.get("orientation", "zigzag"), families=families)
    check_model_size(size, length=length, circumference=circumference, where=_where(spec.path),
                     budget=memory_budget)


def _place_operators(entry, bond, where, space, cache) -> tuple:
    """Where each product of an entry puts its operators on a bond with the members ``bond.slots``.

    Returns, per product, ``(names, members, charges)`` with ``members`` the (index into
    ``bond.sites``, operator name) pairs in written order (operators on members the bond lacks are
    left out) and ``charges`` as :func:`_pair_charges` gives them for a pair (``None`` otherwise).
    ``space`` is ``None`` where no Peierls factor applies (``charges`` is then ``None``); ``cache``
    keeps the charge change of each operator name.
    """
    slots = bond.slots
    out = []
    for factor, names in entry.products:
        if len(names) != bond.arity and all(m is None for _, m in names):
            raise SpecError(
                f"{where}: {entry.label}: {len(names)} operators for bonds of '{entry.on}' with "
                f"{bond.arity} members; give one operator per member"
            )
        members = []
        for position, (name, member) in enumerate(names):
            slot = position if member is None else member
            if slot >= bond.arity:
                raise SpecError(
                    f"{where}: {entry.label}: operator '{name}' targets member {slot}, but bonds of "
                    f"'{entry.on}' have {bond.arity} members"
                )
            if slot in slots:
                members.append((slots.index(slot), name))
        charges = (_pair_charges([name for _, name in members], space, cache)
                   if space is not None and len(members) == 2 else None)
        out.append((names, tuple(members), charges))
    return tuple(out)


def _pair_charges(names, space, cache) -> tuple:
    """The flux-charge changes (scaled) of a pair of operators if it moves the charge, else ``()``.

    ``()`` where the site space has no flux charge, an operator changes it by no definite amount, or
    the pair does not move it from one member to the other (the Peierls factor is then 1).
    """
    if not space.flux_charge:
        return ()
    changes = []
    for name in names:
        if name not in cache:
            cache[name] = operator_charge_change(space, space.operator(name), space.flux_charge)
        delta = cache[name]
        if delta is None:
            return ()
        changes.append(delta * space.flux_charge_scale)
    if changes[0] == 0 or abs(changes[0] + changes[1]) > 1e-12:
        return ()
    return tuple(changes)


def _evaluate_factor(factor, env, where, entry):
    if isinstance(factor, int):
        return factor
    sign, expression = factor
    try:
        return sign * expression.evaluate(env)
    except ExpressionError as err:
        raise SpecError(f"{where}: {entry.label}: {err}") from None


def _resolve_sector(spec: ModelSpec, params, num_sites: int, space: SiteSpace) -> dict[str, int]:
    where = _where(spec.path)
    env = _numeric_env(params) | {"sites": num_sites}
    sector = {}
    values = space.charge_values(spec.conserved)
    for k, name in enumerate(spec.conserved):
        try:
            value = spec.sector[name].evaluate(env)
        except ExpressionError as err:
            raise SpecError(f"{where}: [sector] {name}: {err}") from None
        if isinstance(value, complex) or abs(value - round(value)) > 1e-9:
            raise SpecError(f"{where}: [sector] {name} = {value} is not an integer; choose sizes that give one")
        value = int(round(value))
        lo, hi = num_sites * int(values[:, k].min()), num_sites * int(values[:, k].max())
        steps = np.unique(values[:, k])
        step = int(np.gcd.reduce(np.diff(steps))) if len(steps) > 1 else 1
        if not lo <= value <= hi or (value - lo) % step:
            raise SpecError(
                f"{where}: sector {name} = {value} has no states on {num_sites} sites (reachable: {lo} to {hi} "
                f"in steps of {step}); change [sector] or the lattice size"
            )
        sector[name] = value
    return sector


def load_model(name_or_path: str, overrides: Mapping[str, str] | None = None, *,
               memory_budget: int | None = None) -> Model:
    """Load a model file and place it on its lattice (the usual entry point)."""
    return build_model(load_spec(name_or_path), overrides, memory_budget=memory_budget)


