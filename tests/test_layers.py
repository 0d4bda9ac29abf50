"""The package layout: stages import only downwards, and no module grows past 900 lines.

The check itself is ``tools/check_layers.py`` (kept runnable by hand); these tests run it on the
repository and on small invented packages that break each rule, so that the check is seen to fail.
"""

import importlib.util
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
_spec = importlib.util.spec_from_file_location("check_layers", ROOT / "tools" / "check_layers.py")
check_layers = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(check_layers)


def _package(tmp_path, files):
    for rel, text in files.items():
        path = tmp_path / "netprobe" / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text)
    return tmp_path


def test_repository_layout_has_no_problems():
    assert check_layers.problems(ROOT) == []


def test_script_exits_zero_on_the_repository():
    done = subprocess.run([sys.executable, str(ROOT / "tools" / "check_layers.py")], capture_output=True, text=True)
    assert done.returncode == 0, done.stdout
    assert "layout ok" in done.stdout


def test_upward_import_is_reported(tmp_path):
    root = _package(tmp_path, {
        "__init__.py": "",
        "model/__init__.py": "",
        "model/spec.py": "def f():\n    from netprobe.engines.exact import ground_state\n",
        "engines/__init__.py": "",
        "engines/exact.py": "from netprobe.model import spec\n",
    })
    found = check_layers.problems(root)
    assert found == ["netprobe/model/spec.py:2: stage 'model' imports netprobe.engines.exact from the higher "
                     "stage 'engines'"]
    assert check_layers.main([str(root)]) == 1


def test_from_package_import_counts_as_the_named_stage(tmp_path):
    root = _package(tmp_path, {
        "__init__.py": "",
        "tensor/__init__.py": "from netprobe import __version__\nfrom netprobe import probes\n",
        "probes/__init__.py": "",
    })
    assert check_layers.problems(root) == [
        "netprobe/tensor/__init__.py:2: stage 'tensor' imports netprobe.probes from the higher stage 'probes'"]


def test_long_module_is_reported(tmp_path):
    lines = check_layers.MAX_LINES + 1
    root = _package(tmp_path, {"__init__.py": "", "errors.py": "x = 1\n" * lines})
    assert check_layers.problems(root) == [
        f"netprobe/errors.py: {lines} lines, over {check_layers.MAX_LINES}; split it into two stages or two modules"]
