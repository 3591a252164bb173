"""The package's architecture: layers import downward only, and no module cycles.

Oracle: import-linter's layers contract declared in pyproject.toml (the same
check ``lint-imports`` runs), and the import graph grimp builds from the source.
"""
import pathlib
import subprocess
import sys
import tomllib

import grimp
import pytest

ROOT = pathlib.Path(__file__).resolve().parent.parent
LAYERS = ["design", "circuit", "analysis", "studies", "views", "app", "cli"]


def _run_lint(config: pathlib.Path):
    exe = pathlib.Path(sys.executable).with_name("lint-imports")
    return subprocess.run([str(exe), "--config", str(config), "--no-cache"], cwd=ROOT,
                          capture_output=True, text=True, timeout=300)


def test_layer_contract_is_kept():
    run = _run_lint(ROOT / "pyproject.toml")
    assert run.returncode == 0, run.stdout[-3000:] + run.stderr[-2000:]
    assert "1 kept, 0 broken" in run.stdout


def test_contract_lists_every_layer_in_order():
    cfg = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["importlinter"]
    layers = cfg["contracts"][0]["layers"]
    assert [x.removeprefix("freqpair.") for x in reversed(layers)] == LAYERS
    subpackages = sorted(p.name for p in (ROOT / "freqpair").iterdir()
                         if (p / "__init__.py").exists())
    assert subpackages == sorted(LAYERS)


def test_contract_fails_when_a_lower_layer_imports_a_higher_one(tmp_path):
    """The contract can fail: a copy of the package where the design layer imports
    the views layer breaks it (run on the copy, the real tree untouched)."""
    import shutil
    pkg = tmp_path / "freqpair"
    shutil.copytree(ROOT / "freqpair", pkg, ignore=shutil.ignore_patterns("__pycache__"))
    bad = pkg / "design" / "keys.py"
    bad.write_text(bad.read_text() + "\nfrom freqpair.views import export  # noqa\n")
    cfg = tmp_path / "pyproject.toml"
    cfg.write_text((ROOT / "pyproject.toml").read_text())
    exe = pathlib.Path(sys.executable).with_name("lint-imports")
    run = subprocess.run([str(exe), "--config", str(cfg), "--no-cache"], cwd=tmp_path,
                         capture_output=True, text=True, timeout=300,
                         env={"PYTHONPATH": str(tmp_path), "PATH": "/usr/bin:/bin"})
    assert run.returncode != 0
    assert "freqpair.design.keys -> freqpair.views" in run.stdout


def _cycles(graph, modules):
    """Strongly connected components with more than one module (Tarjan)."""
    index, low, stack, on, out = {}, {}, [], set(), []
    counter = [0]

    def visit(v):
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in graph.find_modules_directly_imported_by(v):
            if w not in modules:
                continue
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    for m in sorted(modules):
        if m not in index:
            visit(m)
    return out


def test_no_two_modules_import_each_other_even_lazily():
    graph = grimp.build_graph("freqpair", cache_dir=None)
    # package __init__ modules are containers, not code that imports back
    modules = {m for m in graph.modules if not (ROOT / m.replace(".", "/") / "__init__.py").exists()}
    assert _cycles(graph, modules) == []


@pytest.mark.parametrize("layer", LAYERS)
def test_each_layer_says_what_it_is(layer):
    import importlib
    doc = importlib.import_module(f"freqpair.{layer}").__doc__ or ""
    assert len(doc.split()) >= 25, f"freqpair.{layer} needs a one-paragraph docstring"
