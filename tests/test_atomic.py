"""Nothing lost: every file freqpair writes is written atomically; designs round-trip."""
import ast
import os
import pathlib

import pytest

from freqpair import analyze, design_from_text, load_design, save_design
from freqpair.design.files import (
    BUILTIN_EXAMPLE,
    atomic_write_text,
    load_design_table,
    save_design_table,
)
from freqpair.design.errors import DesignError
from freqpair.views.export import write_curves_csv

ROOT = pathlib.Path(__file__).resolve().parent.parent
WRITERS = {"open", "write_text", "write_bytes", "savefig", "dump", "save", "output_file"}


def _calls_that_write(tree):
    for node in ast.walk(tree):
        if isinstance(node, ast.Call):
            f = node.func
            name = f.attr if isinstance(f, ast.Attribute) else getattr(f, "id", "")
            if name in WRITERS:
                mode = [a for a in node.args[1:2]] + [k.value for k in node.keywords
                                                      if k.arg == "mode"]
                if name == "open" and not any(isinstance(m, ast.Constant) and
                                              any(c in str(m.value) for c in "wax+")
                                              for m in mode):
                    continue                        # open for reading
                yield node.lineno, name


def test_no_module_writes_a_file_except_through_the_atomic_writers():
    # oracle: common practice (write to a temporary file in the same folder, then rename)
    offenders = []
    for path in sorted((ROOT / "freqpair").rglob("*.py")) + sorted((ROOT / "apps").rglob("*.py")):
        if path.name == "design.py":
            continue                               # home of atomic_write_bytes itself
        for line, name in _calls_that_write(ast.parse(path.read_text(encoding="utf-8"))):
            offenders.append(f"{path.relative_to(ROOT)}:{line}: {name}")
    assert offenders == []


def test_an_interrupted_write_leaves_the_old_file_whole(tmp_path, monkeypatch):
    # oracle: common practice (atomic rename: readers see the old file or the new one)
    target = tmp_path / "design.toml"
    target.write_text("old content\n", encoding="utf-8")

    def boom(*_):
        raise OSError("disk full")
    monkeypatch.setattr(os, "replace", boom)
    with pytest.raises(OSError):
        atomic_write_text(target, "new content\n")
    assert target.read_text(encoding="utf-8") == "old content\n"
    assert [p.name for p in tmp_path.iterdir()] == ["design.toml"]   # no temp left behind


def test_a_saved_design_reloads_identical(tmp_path, example_path):
    # oracle: common practice (save → load is the identity on the validated design)
    design = load_design(example_path)
    save_design(design, tmp_path / "copy.toml")
    assert load_design(tmp_path / "copy.toml") == design


def test_a_saved_table_keeps_the_users_own_strings(tmp_path):
    # oracle: common practice (a user's "10 k" comes back as "10 k", not 10000.0)
    src = tmp_path / "in.toml"
    src.write_text(BUILTIN_EXAMPLE, encoding="utf-8")
    table = load_design_table(src)
    table["tail"]["capacitance"] = "4.7 pF"
    save_design_table(table, tmp_path / "out.toml")
    again = load_design_table(tmp_path / "out.toml")
    assert again == table
    assert again["load"]["resistance"] == "10 k"
    assert load_design(tmp_path / "out.toml").tail.capacitance == pytest.approx(4.7e-12)


def test_an_invalid_table_is_not_written(tmp_path):
    # oracle: DESIGN.md §3 (bad values are refused naming the key)
    table = load_design_table_from_text(tmp_path, BUILTIN_EXAMPLE)
    table["pair"]["beta"] = -1
    with pytest.raises(DesignError, match="pair.beta"):
        save_design_table(table, tmp_path / "out.toml")
    assert not (tmp_path / "out.toml").exists()


def load_design_table_from_text(tmp_path, text):
    p = tmp_path / "src.toml"
    p.write_text(text, encoding="utf-8")
    return load_design_table(p)


def test_the_curves_csv_is_complete_after_writing(tmp_path):
    # oracle: common practice (a header plus one row per sweep point)
    result = analyze(design_from_text(BUILTIN_EXAMPLE))
    out = tmp_path / "curves.csv"
    write_curves_csv(result, out)
    rows = out.read_text(encoding="utf-8").splitlines()
    assert len(rows) == 1 + len(result.curves().f_hz)
