"""Reference pages generated from the netprobe package at documentation build time.

The pages (reStructuredText) are written to ``docs/reference/generated/`` and ``docs/api/generated/``
when Sphinx starts (the ``builder-inited`` event); nothing here is hand-copied from the code:

- the model-file layout: tables, keys (from the spec parser's allowed-key sets), lattice keys,
  lattices, geometries, orientations, bond families (by building a small lattice of each kind) and
  site spaces with their operators and charges;
- the study-file layout (from the study description's allowed-key sets);
- the region layouts: kind, syntax and parameters (from the layout registry and each builder's
  signature and numpydoc docstring);
- every command and option (from ``build_parser()`` of the command line);
- the JSON keys per command (the table in README.md, the single place where they are written);
- the API reference: one automodule page per module, found by walking the package recursively.

Modules are found by name with fallbacks (:func:`find_attribute`), so that the reference keeps working
when the package's modules move into subpackages. The generator functions need only netprobe (not Sphinx),
so ``tests/test_docs_reference.py`` can compare them with the code.
"""

from __future__ import annotations

import argparse
import importlib
import inspect
import pkgutil
import re
from pathlib import Path

__all__ = ["find_attribute", "package_modules", "model_file_rst", "study_file_rst", "regions_rst",
           "commands_rst", "json_keys_rst", "readme_json_table", "subcommands", "api_pages", "write_all",
           "docstring_problems", "VERBATIM", "MODEL_KEY_TEXT", "TERM_KEY_TEXT", "TOP_KEY_TEXT", "LATTICE_KEY_TEXT", "STUDY_TABLE_TEXT", "setup"]

DOCS = Path(__file__).resolve().parent.parent
ROOT = DOCS.parent

# Descriptions written for the reference. The sets of keys themselves come from the code; a key of the code
# without a description here (or a description of a key the code no longer has) stops the build and fails
# tests/test_docs_reference.py.
TOP_KEY_TEXT = {
    "model": "table: name, description, site space and conserved charges of the model",
    "parameters": "table: parameters (numbers or expressions in earlier parameters), including the lattice "
                  "keys; every entry can be overridden with ``--set name=value``",
    "sector": "table: target value of each conserved charge, an expression in the parameters and ``sites``",
    "term": "array of tables ``[[term]]``: operator products placed on a bond family with a coupling",
    "z2_loops": "optional table: ``charge_ops``, ``charge_sublattice``, ``flux_ops``, ``flux_sublattice``; the "
                "products of these one-site operators over a sublattice of one column measure the Z2 charge of "
                "the left part and the Z2 flux through the cylinder; ``netprobe edge`` reports them as the "
                "sector labels of the momentum polarization",
}
MODEL_KEY_TEXT = {
    "name": "required; the model's name",
    "description": "one line, shown by ``netprobe models``",
    "site": "a registered site space (see below)",
    "conserved": "list of conserved charges used to block the problem (may be empty)",
    "source": "free text: where the model was published (shown by ``netprobe check``)",
}
TERM_KEY_TEXT = {
    "on": "a bond family of the lattice (see the table of families below)",
    "ops": "a sum of products separated by ``+`` or ``-``, one operator per bond member in member order, or "
           "``name@k`` for member k; ``a.b`` is the on-site product; a product may start with ``number*`` or "
           "``(expression)*``",
    "coupling": "expression in the parameters; on the ``sites`` family also ``x``, ``y``, ``sublattice``, "
                "``eps``; on every family ``members`` (members present on the bond)",
    "conjugate": "also add the Hermitian conjugate (default false)",
    "peierls": "apply flux and twist phases to charge-moving pairs (default true)",
}
LATTICE_KEY_TEXT = {
    "lattice": "lattice name (see below)",
    "geometry": "cylinder (x open, y periodic), strip (both open) or torus",
    "orientation": "honeycomb only: zigzag or armchair open ends",
    "length": "unit cells along the open direction x",
    "circumference": "unit cells around the periodic direction y (1 for a chain)",
    "flux": "magnetic flux per unit cell, in flux quanta (Peierls phases)",
    "twist": "phase (radians) picked up by a particle going once around the cylinder",
}
STUDY_TABLE_TEXT = {
    "study": "name, model, engine, seed, warm start",
    "set": "``--set`` values applied at every point",
    "grid": "one or two swept parameters (``values`` or ``start``/``stop``/``num``)",
    "point": "array of tables ``[[point]]``: an explicit list of points instead of a grid",
    "ladder": "DMRG bond dimensions and sweep settings",
    "measure": "the region (or named regions) and the probes",
    "executor": "workers, attempts, heartbeat, lease and connection times",
    "verdicts": "thresholds that flag unconverged probes and energies",
}


# ---------------------------------------------------------------------------------------------- lookup
def package_modules(package: str = "netprobe") -> list[str]:
    """Names of the package and every module below it, sorted (``__main__`` left out)."""
    root = importlib.import_module(package)
    names = [package]
    for info in pkgutil.walk_packages(root.__path__, prefix=package + "."):
        if info.name.rsplit(".", 1)[-1] == "__main__":
            continue
        names.append(info.name)
    return sorted(names)


def find_attribute(attr: str, candidates: tuple[str, ...], package: str = "netprobe"):
    """Return ``(module, value)`` for the first module that defines ``attr``.

    The candidates are tried in order; if none has it, every module of the package is searched, so the
    reference survives modules moving into subpackages.
    """
    tried = []
    for name in (*candidates, *package_modules(package)):
        if name in tried:
            continue
        tried.append(name)
        try:
            module = importlib.import_module(name)
        except ImportError:
            continue
        if attr in vars(module):
            return module, vars(module)[attr]
    raise LookupError(f"no module of {package} defines {attr} (tried {', '.join(candidates)} and the package)")


_SPEC = ("netprobe.spec", "netprobe.model.spec", "netprobe.model")
_LATTICE = ("netprobe.lattice", "netprobe.model.lattice", "netprobe.model")
_SITES = ("netprobe.sites", "netprobe.model.sites", "netprobe.model")
_REGIONS = ("netprobe.regions", "netprobe.regions.layouts", "netprobe.regions.registry")
_STUDY = ("netprobe.study.description", "netprobe.study", "netprobe.pipeline.study")
_CLI = ("netprobe.cli", "netprobe.cli.main", "netprobe.cli.parser")


# ------------------------------------------------------------------------------------------ rst helpers
_SPECIAL = re.compile(r"([\\*`|_])")


def text(value) -> str:
    """Escape plain text for reStructuredText."""
    return _SPECIAL.sub(r"\\\1", str(value))


def lit(value) -> str:
    return f"``{value}``"


def title(words: str, mark: str = "=") -> list[str]:
    return [words, mark * len(words), ""]


def list_table(header: list[str], rows: list[list[str]], widths: str | None = None) -> list[str]:
    out = [".. list-table::", "   :header-rows: 1"]
    if widths:
        out.append(f"   :widths: {widths}")
    out.append("")
    for row in [header, *rows]:
        out.append(f"   * - {row[0]}")
        out.extend(f"     - {cell}" for cell in row[1:])
    return out + [""]


def check_described(code_keys, described: dict, what: str):
    """Raise if the described keys and the code's keys differ."""
    missing = sorted(set(code_keys) - set(described))
    stale = sorted(set(described) - set(code_keys))
    if missing or stale:
        raise RuntimeError(f"reference of {what} is out of date: keys without a description {missing}, "
                           f"descriptions of keys the code does not have {stale} (edit docs/_ext/netprobe_reference.py)")


# ----------------------------------------------------------------------------------------- model files
def model_keys() -> dict:
    """The allowed-key sets of the model-file parser."""
    return {name: set(find_attribute(name, _SPEC)[1])
            for name in ("_TOP_KEYS", "_MODEL_KEYS", "_TERM_KEYS", "LATTICE_KEYS")}


def model_file_rst() -> str:
    keys = model_keys()
    lattice_types = find_attribute("LATTICE_KEYS", _SPEC)[1]
    check_described(keys["_TOP_KEYS"], TOP_KEY_TEXT, "model-file tables")
    check_described(keys["_MODEL_KEYS"], MODEL_KEY_TEXT, "[model] keys")
    check_described(keys["_TERM_KEYS"], TERM_KEY_TEXT, "[[term]] keys")
    check_described(keys["LATTICE_KEYS"], LATTICE_KEY_TEXT, "lattice keys")
    spec_module = find_attribute("LATTICE_KEYS", _SPEC)[0]
    out = title("Model files")
    out += [f"Generated from ``{spec_module.__name__}`` at build time. A model file is TOML with these "
            "top-level entries (any other key is refused with the list of valid ones):", ""]
    out += list_table(["entry", "meaning"], [[lit(k), TOP_KEY_TEXT[k]] for k in sorted(keys["_TOP_KEYS"])], "20 80")
    out += title("[model]", "-")
    out += list_table(["key", "meaning"], [[lit(k), MODEL_KEY_TEXT[k]] for k in sorted(keys["_MODEL_KEYS"])], "20 80")
    out += title("[parameters]: lattice keys", "-")
    out += ["Any other entry of ``[parameters]`` is a model parameter usable in expressions.", ""]
    out += list_table(["key", "type", "meaning"],
                      [[lit(k), lit(getattr(lattice_types[k], "__name__", lattice_types[k])), LATTICE_KEY_TEXT[k]]
                       for k in lattice_types], "20 10 70")
    out += title("[[term]]", "-")
    out += list_table(["key", "meaning"], [[lit(k), TERM_KEY_TEXT[k]] for k in sorted(keys["_TERM_KEYS"])], "20 80")
    out += lattices_rst() + site_spaces_rst()
    return "\n".join(out) + "\n"


def lattices_rst() -> list[str]:
    module, names = find_attribute("LATTICES", _LATTICE)
    geometries = find_attribute("GEOMETRIES", _LATTICE)[1]
    orientations = find_attribute("ORIENTATIONS", _LATTICE)[1]
    build = module.build_lattice
    out = title("Lattices and bond families", "-")
    out += [f"Geometries: {', '.join(lit(g) for g in geometries)}. Honeycomb orientations: "
            f"{', '.join(lit(o) for o in orientations)}. The families below are those of a small cylinder "
            "(built at documentation time); ``sites`` is the one-site family.", ""]
    rows = []
    for name in names:
        for orientation in (orientations if name == "honeycomb" else (None,)):
            kw = {} if orientation is None else {"orientation": orientation}
            lattice = build(name, length=4, circumference=1 if name == "chain" else 4, **kw)
            label = name if orientation is None else f"{name} ({orientation})"
            rows.append([text(label), ", ".join(lit(f) for f in lattice.families)])
    return out + list_table(["lattice", "bond families"], rows, "25 75")


def site_spaces_rst() -> list[str]:
    spaces = find_attribute("SITE_SPACES", _SITES)[1]
    out = title("Site spaces", "-")
    rows = [[lit(name), text(space.description), ", ".join(lit(o) for o in space.operators),
             ", ".join(lit(c) for c in space.charges) or "none"] for name, space in spaces.items()]
    return out + list_table(["site", "description", "operators", "charges"], rows, "15 35 35 15")


# ----------------------------------------------------------------------------------------- study files
def study_file_rst() -> str:
    module, top = find_attribute("_TOP_KEYS", _STUDY)
    check_described(top, STUDY_TABLE_TEXT, "study-file tables")
    groups = [("[study]", "_STUDY_KEYS"), ("[grid] axis", "_AXIS_KEYS"), ("[measure]", "_MEASURE_KEYS"),
              ("[ladder]", "_LADDER_ONLY"), ("[ladder] sweep settings", "_SWEEP_KEYS")]
    out = title("Study files")
    out += [f"Generated from ``{module.__name__}`` at build time. Bundled studies live in ``models/studies/``.", ""]
    out += list_table(["table", "contents"], [[lit(k), STUDY_TABLE_TEXT[k]] for k in sorted(top)], "20 80")
    rows = [[lit(table), ", ".join(lit(k) for k in sorted(vars(module)[attr]))] for table, attr in groups]
    for table, cls in (("[executor]", "ExecutorSettings"), ("[verdicts]", "VerdictSettings")):
        if hasattr(module, cls):
            rows.append([lit(table), ", ".join(lit(f) for f in getattr(module, cls).__dataclass_fields__)])
    out += title("Keys", "-")
    out += list_table(["table", "keys"], rows, "25 75")
    if hasattr(module, "PROBES"):
        out += title("Probes", "-")
        out += list_table(["probe", "meaning", "engines"],
                          [[lit(k), text(v.text), ", ".join(sorted(v.engines))] for k, v in module.PROBES.items()],
                          "20 60 20")
    return "\n".join(out) + "\n"


# --------------------------------------------------------------------------------------------- regions
def layout_parameters(builder) -> list[tuple[str, object]]:
    """(name, default or inspect.Parameter.empty) of a layout builder's keyword parameters, without limits."""
    sig = inspect.signature(builder)
    return [(p.name, p.default) for p in sig.parameters.values()
            if p.kind is p.KEYWORD_ONLY and p.name != "limits"]


def _parameter_docs(builder) -> dict:
    try:
        from numpydoc.docscrape import FunctionDoc
    except ImportError:  # without the docs extra the reference lacks only the parameter descriptions
        return {}
    try:
        doc = FunctionDoc(builder)
    except Exception:  # a malformed docstring leaves the descriptions empty, not the build broken
        return {}
    out = {}
    for p in doc["Parameters"]:  # "inner, outer" documents two parameters
        for name in p.name.split(","):
            out[name.strip()] = " ".join(p.desc).strip()
    return out


def layout_parameter_docs(layouts) -> dict:
    """kind -> parameter -> description; a parameter left undescribed by its builder takes the description
    that another builder gives to the same name (``center``, ``radius``)."""
    docs = {kind: _parameter_docs(builder) for kind, builder in layouts.items()}
    pool = {}
    for entries in docs.values():
        for name, desc in entries.items():
            pool.setdefault(name, desc) if desc else None
    return {kind: {name: entries.get(name) or pool.get(name, "") for name, _ in layout_parameters(layouts[kind])}
            for kind, entries in docs.items()}


def regions_rst() -> str:
    module, layouts = find_attribute("LAYOUTS", _REGIONS)
    syntax = vars(module).get("SYNTAX", {})
    all_docs = layout_parameter_docs(layouts)
    out = title("Region layouts")
    out += [f"Generated from the layout registry of ``{module.__name__}``. The command-line form is "
            "``kind:key=value,key=value`` (``--region`` of ``probe``, ``--layout`` of ``regions``, ``region`` in "
            "study files); angles in degrees, counterclockwise from +x; a centre is two numbers ``X,Y``.", ""]
    for kind, builder in layouts.items():
        out += title(kind, "-")
        summary = (inspect.getdoc(builder) or "").split("\n\n")[0].replace("\n", " ")
        out += [summary, ""]  # docstring text is reStructuredText already
        if kind in syntax:
            out += ["Syntax: " + lit(syntax[kind]), ""]
        docs = all_docs[kind]
        rows = []
        for name, default in layout_parameters(builder):
            shown = "required" if default is inspect.Parameter.empty else lit(repr(default))
            rows.append([lit(name), shown, docs.get(name, "")])
        out += list_table(["parameter", "default", "meaning"], rows, "15 15 70")
    return "\n".join(out) + "\n"


# -------------------------------------------------------------------------------------------- commands
def build_parser() -> argparse.ArgumentParser:
    return find_attribute("build_parser", _CLI)[1]()


def subcommands(parser: argparse.ArgumentParser | None = None) -> dict:
    """name -> (help, subparser) of every subcommand of the ``netprobe`` command."""
    parser = parser or build_parser()
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            helps = {a.dest: a.help for a in action._choices_actions}
            return {name: (helps.get(name, ""), sub) for name, sub in action.choices.items()}
    return {}


def options(sub: argparse.ArgumentParser) -> list[argparse.Action]:
    return [a for a in sub._actions if not isinstance(a, argparse._HelpAction)]


def commands_rst() -> str:
    parser = build_parser()
    out = title("Commands")
    out += ["Generated from the command's argument parser. Every command accepts ``-h``/``--help``; a user "
            "mistake ends with one line on standard error and exit status 2.", ""]
    for name, (helptext, sub) in subcommands(parser).items():
        out += title(f"netprobe {name}", "-")
        out += [text(helptext), "", "::", ""]
        usage = sub.format_usage().strip().removeprefix("usage: ")
        out += ["   " + line for line in usage.splitlines()] + [""]
        rows = []
        for action in options(sub):
            names = ", ".join(action.option_strings) or (action.metavar or action.dest)
            if action.option_strings and action.nargs != 0:
                names += f" {action.metavar or action.dest.upper()}"
            extra = []
            if action.choices:
                extra.append("one of " + ", ".join(lit(c) for c in action.choices))
            if action.required:
                extra.append("required")
            rows.append([lit(names), " ".join([text(action.help or "")] + [f"({e})" for e in extra])])
        out += list_table(["argument", "meaning"], rows, "30 70")
    return "\n".join(out) + "\n"


# ------------------------------------------------------------------------------------------- JSON keys
def readme_json_table(readme: Path | None = None) -> list[tuple[str, str]]:
    """(command, keys) rows of the JSON-key table in README.md (section "JSON output")."""
    body = (readme or ROOT / "README.md").read_text(encoding="utf-8")
    section = body.split("### JSON output", 1)[1].split("\n#", 1)[0]
    rows = []
    for line in section.splitlines():
        cells = [c.strip() for c in line.strip().strip("|").split("|")] if line.startswith("|") else []
        if len(cells) == 2 and cells[0].startswith("`netprobe"):
            rows.append((cells[0].strip("`"), cells[1]))
    return rows


def _markdown_cell(cell: str) -> str:
    parts = re.split(r"(`[^`]*`)", cell)
    return "".join(f"``{p[1:-1]}``" if p.startswith("`") else text(p) for p in parts)


def json_keys_rst() -> str:
    out = title("JSON output")
    out += ["``--json`` makes standard output one JSON object (progress and notes go to standard error). The keys, "
            "per command (from the table in README.md):", ""]
    out += list_table(["command", "keys"], [[lit(c), _markdown_cell(k)] for c, k in readme_json_table()], "22 78")
    return "\n".join(out) + "\n"


# ------------------------------------------------------------------------------------------------- API
def _module_page(name: str) -> str:
    """An automodule page; a package's re-exported names are shown without a second index entry."""
    module = importlib.import_module(name)
    out = title(lit(name)) + [f".. automodule:: {name}"]
    if not hasattr(module, "__path__"):
        return "\n".join(out + ["   :members:", "   :undoc-members:", "   :show-inheritance:", ""])
    exported = list(getattr(module, "__all__", ()))
    own = [n for n in exported if getattr(getattr(module, n, None), "__module__", name) == name
           and not inspect.ismodule(getattr(module, n, None))]
    out += ([f"   :members: {', '.join(own)}", "   :undoc-members:"] if own else []) + [""]
    for member in exported:
        if member in own:
            continue
        obj = getattr(module, member, None)
        kind = "class" if inspect.isclass(obj) else "function" if callable(obj) else "data"
        out += [f".. auto{kind}:: {name}.{member}", "   :no-index:", ""]
    return "\n".join(out)


def api_pages() -> dict[str, str]:
    """file name -> page, one automodule page per module of the package, and an index."""
    names = package_modules()
    pages = {f"{name}.rst": _module_page(name) for name in names}
    index = title("API reference") + [
        "One page per module, generated by walking the package. ``netprobe`` itself re-exports the public API "
        "(its entries there link to the defining modules' pages through the index).", "", ".. toctree::",
        "   :maxdepth: 1", ""]
    index += [f"   {name}" for name in names]
    pages["index.rst"] = "\n".join(index) + "\n"
    return pages


# ------------------------------------------------------------------------------------ docstring guard
VERBATIM: list[str] = []
"""Objects whose docstrings are not valid reStructuredText and are shown verbatim (filled during a build)."""

_ROLE = re.compile(r":[\w:.-]+:`([^`]*)`")


_IGNORED = ("Unknown directive type", "Unknown interpreted text role", "No role entry", "No directive entry")


def docstring_problems(source: str) -> list[str]:
    """docutils warnings and errors of reStructuredText (Sphinx-only roles and directives not counted)."""
    import docutils.utils
    from docutils.frontend import get_default_settings
    from docutils.parsers.rst import Parser

    settings = get_default_settings(Parser)
    settings.report_level = 5
    settings.halt_level = 5
    settings.warning_stream = False
    settings.file_insertion_enabled = False
    settings.raw_enabled = False
    document = docutils.utils.new_document("<docstring>", settings)
    messages = []

    def observer(msg):
        line = msg.astext().splitlines()[0] if msg.astext() else ""
        if msg["level"] >= docutils.utils.Reporter.WARNING_LEVEL and not any(i in line for i in _IGNORED):
            messages.append(line)

    document.reporter.attach_observer(observer)
    try:  # roles are read as literals: Sphinx's roles need a build environment
        Parser().parse(_ROLE.sub(lambda m: "``" + m.group(1).replace("`", "") + "``", source), document)
    except Exception:  # a Sphinx directive outside a build: the build itself judges that part
        pass
    from docutils import nodes

    messages += [f"undefined substitution |{n.astext()}|" for n in document.findall(nodes.substitution_reference)]
    return messages


def guard_docstring(app, what, name, obj, options, lines):
    """Show a docstring that would break the build (invalid reStructuredText) as a literal block.

    Runs after numpydoc, on its output; a docstring with problems is replaced by its raw text.
    """
    if not lines or not docstring_problems("\n".join(lines)):
        return
    VERBATIM.append(name + " :: " + "; ".join(docstring_problems("\n".join(lines))[:2]))
    raw = inspect.getdoc(obj) or "\n".join(lines)
    lines[:] = ["::", ""] + ["    " + line for line in raw.splitlines()] + [""]


# --------------------------------------------------------------------------------------------- writing
def _write(path: Path, content: str):
    path.parent.mkdir(parents=True, exist_ok=True)
    if not path.exists() or path.read_text(encoding="utf-8") != content:  # unchanged files stay unchanged
        path.write_text(content, encoding="utf-8")


def write_all(docs: Path = DOCS):
    ref = docs / "reference" / "generated"
    for name, make in (("model_file", model_file_rst), ("study_file", study_file_rst), ("regions", regions_rst),
                       ("commands", commands_rst), ("json_keys", json_keys_rst)):
        _write(ref / f"{name}.rst", make())
    api = docs / "api" / "generated"
    pages = api_pages()
    for old in api.glob("*.rst") if api.is_dir() else ():
        if old.name not in pages:
            old.unlink()
    for name, content in pages.items():
        _write(api / name, content)


def _report_verbatim(app, exception):
    if VERBATIM and exception is None:
        from sphinx.util import logging

        logging.getLogger(__name__).info("netprobe docstrings shown verbatim (not valid reStructuredText): "
                                         + ", ".join(sorted(set(VERBATIM))))


def setup(app):
    app.connect("builder-inited", lambda app: write_all(Path(app.srcdir)))
    app.connect("autodoc-process-docstring", guard_docstring, priority=600)
    app.connect("build-finished", _report_verbatim)
    return {"parallel_read_safe": True, "version": "1"}
