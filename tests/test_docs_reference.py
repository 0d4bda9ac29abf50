"""The generated documentation reference (docs/_ext/netprobe_reference.py) against the code and README.

The reference pages are generated from the package at build time; these tests fail when a part of the
code (a command option, a layout kind or parameter, a model-file key, a module) is missing from them,
when the hand-written descriptions of model-file keys fall out of step with the parser's key sets, or when
README.md's JSON-key table misses a command or disagrees with what a command prints (checked by running
the cheap commands; common practice for documentation tests).
"""

import argparse
import importlib.util
import inspect
import json
import re
from pathlib import Path

import pytest
from conftest import run_main

ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture(scope="module")
def ref():
    spec = importlib.util.spec_from_file_location("netprobe_reference", ROOT / "docs" / "_ext" / "netprobe_reference.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def _sections(rst: str) -> dict:
    """Section title -> body of a generated page (titles underlined with '-')."""
    lines = rst.splitlines()
    out, current = {}, None
    for i, line in enumerate(lines):
        if i + 1 < len(lines) and lines[i + 1] and set(lines[i + 1]) == {"-"} and len(lines[i + 1]) == len(line):
            current = line
            out[current] = []
        elif current is not None:
            out[current].append(line)
    return {k: "\n".join(v) for k, v in out.items()}


def _subparsers(parser):
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            return dict(action.choices)
    raise AssertionError("the netprobe parser has no subcommands")


def test_every_command_and_option_is_in_the_reference(ref):
    parser = ref.find_attribute("build_parser", ("netprobe.cli",))[1]()
    sections = _sections(ref.commands_rst())
    commands = _subparsers(parser)
    assert len(commands) >= 10
    for name, sub in commands.items():
        body = sections.get(f"netprobe {name}")
        assert body is not None, f"command {name} missing from the reference"
        for action in sub._actions:
            if isinstance(action, argparse._HelpAction):  # the page says once that every command has -h
                continue
            for option in action.option_strings:
                assert f"``{option}" in body or f", {option}" in body, f"{name} {option} missing"
            if not action.option_strings:
                assert (action.metavar or action.dest) in body, f"{name} argument {action.dest} missing"


def test_every_layout_kind_and_parameter_is_in_the_reference(ref):
    module, layouts = ref.find_attribute("LAYOUTS", ("netprobe.regions",))
    sections = _sections(ref.regions_rst())
    assert set(layouts) == set(sections), "region layout sections differ from the registry"
    for kind, builder in layouts.items():
        body = sections[kind]
        if kind in getattr(module, "SYNTAX", {}):
            assert module.SYNTAX[kind] in body
        for p in inspect.signature(builder).parameters.values():
            if p.kind is p.KEYWORD_ONLY and p.name != "limits":
                assert f"``{p.name}``" in body, f"{kind}: parameter {p.name} missing"


def test_layout_parameters_are_described(ref):
    pytest.importorskip("numpydoc")
    _, layouts = ref.find_attribute("LAYOUTS", ("netprobe.regions",))
    docs = ref.layout_parameter_docs(layouts)
    undocumented = [f"{kind}.{name}" for kind, builder in layouts.items()
                    for name, _ in ref.layout_parameters(builder) if not docs[kind].get(name)]
    assert not undocumented, f"layout parameters without a description in the builder's docstring: {undocumented}"


def test_model_file_reference_matches_the_parser(ref):
    keys = ref.model_keys()
    # the descriptions written in the reference cover exactly the keys the parser accepts
    for code, described in (("_TOP_KEYS", ref.TOP_KEY_TEXT), ("_MODEL_KEYS", ref.MODEL_KEY_TEXT),
                            ("_TERM_KEYS", ref.TERM_KEY_TEXT), ("LATTICE_KEYS", ref.LATTICE_KEY_TEXT)):
        assert set(keys[code]) == set(described), code
    rst = ref.model_file_rst()
    for group in keys.values():
        for key in group:
            assert f"``{key}``" in rst
    lattices = ref.find_attribute("LATTICES", ("netprobe.model.lattice",))[1]
    spaces = ref.find_attribute("SITE_SPACES", ("netprobe.model.sites",))[1]
    for name in (*lattices, *spaces):
        assert name in rst


def test_model_file_reference_rejects_a_stale_description(ref):
    with pytest.raises(RuntimeError, match="out of date"):
        ref.check_described({"a", "b"}, {"a": "x", "c": "y"}, "test keys")


def test_study_file_reference_matches_the_parser(ref):
    module, top = ref.find_attribute("_TOP_KEYS", ("netprobe.study.description",))
    assert set(top) == set(ref.STUDY_TABLE_TEXT)
    rst = ref.study_file_rst()
    for attr in ("_STUDY_KEYS", "_AXIS_KEYS", "_MEASURE_KEYS", "_LADDER_ONLY", "_SWEEP_KEYS"):
        for key in vars(module)[attr]:
            assert f"``{key}``" in rst, key


def _json_commands(parser):
    return {name for name, sub in _subparsers(parser).items()
            if any("--json" in a.option_strings for a in sub._actions)}


def test_readme_json_table_lists_every_command(ref):
    parser = ref.find_attribute("build_parser", ("netprobe.cli",))[1]()
    rows = ref.readme_json_table()
    listed = {command.split()[1] for command, _ in rows}
    assert _json_commands(parser) <= listed, f"README JSON table lacks {_json_commands(parser) - listed}"
    assert listed <= set(_subparsers(parser)), f"README JSON table names unknown commands {listed - set(_subparsers(parser))}"
    page = ref.json_keys_rst()
    for command, _ in rows:
        assert f"``{command}``" in page


def _top_level_keys(cell: str) -> set:
    """Backticked keys of a README cell outside parentheses (the top level of the JSON object)."""
    depth, outside = 0, []
    for ch in cell:
        depth += ch == "("
        if depth == 0:
            outside.append(ch)
        depth -= ch == ")" and depth > 0
    return set(re.findall(r"`([a-zA-Z_]+)`", "".join(outside)))


@pytest.mark.parametrize("args", [
    ("models",),
    ("check", "heisenberg", "--set", "length=6"),
    ("exact", "heisenberg", "--set", "length=6"),
    ("regions", "heisenberg", "--set", "lattice=square", "--set", "length=8", "--set", "circumference=6",
     "--layout", "sectors:radius=2"),
])
def test_readme_json_keys_match_the_output(ref, args):
    rows = dict(ref.readme_json_table())
    proc = run_main(*args, "--json")  # in process: test_cli.py runs these commands as subprocesses
    assert proc.returncode == 0, proc.stderr
    printed = set(json.loads(proc.stdout))
    assert printed == _top_level_keys(rows[f"netprobe {args[0]}"]), proc.stdout[:300]


def test_api_reference_covers_every_module_and_public_name(ref):
    import netprobe

    pages = ref.api_pages()
    index = pages["index.rst"]
    for module in ref.package_modules():
        assert f"{module}.rst" in pages and f"   {module}" in index
        assert f".. automodule:: {module}" in pages[f"{module}.rst"]
    top = pages["netprobe.rst"]
    for name in netprobe.__all__:
        assert name == "__version__" or f"netprobe.{name}" in top or name in top, name


def test_docstring_guard_flags_invalid_text(ref):
    pytest.importorskip("docutils")
    assert ref.docstring_problems("The absolute value |J| of the commutator.")
    assert ref.docstring_problems("Title\n\n    indented\n  unindented block\n")
    assert not ref.docstring_problems("Fine text with ``code`` and :func:`roles`.\n\nA second paragraph.")
