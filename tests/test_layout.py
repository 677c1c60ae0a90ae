"""The layout the contributor guide promises: imports run one way, the command line starts light,
and the shipped data is found through the package."""

import ast
import json
import subprocess
import sys
from pathlib import Path

import pytest

import harmony
from harmony import resources

PACKAGE = Path(harmony.__file__).resolve().parent
#: Bottom to top, as in DEVELOPERS.md; a module may import its own level and those below.
LEVELS = ["base", "colour", "photo", "shop", "rules", "suggest", "evaluation", "report", "demo", "serve", "cli",
          "top"]
BASE = {"errors", "fileio", "resources"}


def _level(module):
    parts = module.split(".")
    if parts[0] != "harmony":
        return None
    if len(parts) == 1:
        return "top"
    return "base" if parts[1] in BASE else parts[1]


def _imports(path):
    tree = ast.parse(path.read_text(encoding="utf-8"))
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            yield node.lineno, node.module, [a.name for a in node.names]
        elif isinstance(node, ast.Import):
            for a in node.names:
                yield node.lineno, a.name, []


def _modules():
    for path in sorted(PACKAGE.rglob("*.py")):
        rel = path.relative_to(PACKAGE.parent).with_suffix("")
        name = ".".join(rel.parts).removesuffix(".__init__")
        yield path, name


@pytest.mark.parametrize("path,name", list(_modules()), ids=lambda v: str(v) if isinstance(v, str) else "")
def test_imports_run_one_way(path, name):
    own = LEVELS.index(_level(name))
    for line, module, names in _imports(path):
        targets = [module] if module != "harmony" else [f"harmony.{n}" for n in names]
        for target in targets:
            level = _level(target)
            if level is None or level == "top":
                continue
            # The report may read finished evaluation results; that is the one sideways edge.
            allowed = LEVELS.index(level) <= own or (_level(name) == "report" and level == "evaluation")
            assert allowed, f"{path.name}:{line}: {name} ({_level(name)}) imports {target} ({level})"
            if level == "demo":
                assert _level(name) in ("demo", "cli"), f"{name} imports the demo ({target})"


def test_no_module_is_over_800_lines():
    # The contributor guide's limit (issue of the package split): one concept per module.
    long = {str(p.relative_to(PACKAGE)): n for p in PACKAGE.rglob("*.py")
            if (n := len(p.read_text(encoding="utf-8").splitlines())) > 800}
    assert not long


def test_the_command_line_starts_without_the_heavy_libraries():
    # Not a timing test: which modules `harmony --help` loads decides its start-up cost.
    code = ("import sys; from harmony.cli import main\n"
            "try:\n    main(['--help'])\nexcept SystemExit:\n    pass\n"
            "print(__import__('json').dumps(sorted(m for m in sys.modules)))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    loaded = set(json.loads(done.stdout.splitlines()[-1]))
    heavy = {"scipy", "sklearn", "skimage", "networkx", "jinja2", "dask", "distributed", "pyarrow", "PIL", "numpy"}
    assert not heavy & loaded


def test_shipped_data_is_found_through_the_package():
    assert resources.DEFAULT_RULES.is_file()
    assert (resources.SHOP_DIR / "catalogue.csv").is_file()
    assert resources.room_template("dining_corner") == resources.ROOMS_DIR / "dining_corner.toml"
    assert resources.room_template("../rules/default") is None
    assert resources.room_template("no_such_room") is None


def test_the_package_imports_only_its_declared_dependencies():
    # scikit-learn is a test extra (reference implementations and sample photographs): an
    # installed harmony never imports it, and without it POT's import (the EMD baseline) is
    # about a second shorter, since POT loads scikit-learn whenever it finds it.
    for path, name in _modules():
        for line, module, _ in _imports(path):
            assert module.split(".")[0] != "sklearn", f"{path.name}:{line}: {name} imports {module}"
