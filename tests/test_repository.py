"""The repository cites only what a clone contains or what anyone can look up.

Sources: common practice for reproducible research code — a citation must resolve for every reader
(published works, standards, libraries, or files in this repository). The rules are written out in
docs/references.md (introduction) and docs/ARCHITECTURE.md ("Citations"), which also
states the layers checked at the end of this file.

* no absolute path of a developer's machine in any tracked file;
* no citation of reading material kept outside the repository (its file names are built below from
  pieces, so this file does not trip its own check);
* every "docs/references.md §n" names a section that exists, every cited docs/ file exists;
* every test module names its sources in its docstring ("Sources:").
"""

from __future__ import annotations

import ast
import re
import subprocess
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
SKIP_DIRS = {".git", ".venv", "results", "__pycache__", ".pytest_cache", "build", "dist"}
TEXT_SUFFIXES = {".py", ".md", ".toml", ".txt", ".cfg", ".ini", ".yml", ".yaml", ".json", ".csv", ""}

# Absolute paths of a machine: the work, home, root, temp and Users folders at the root of a Unix or
# Windows file system (tests use tmp_path, never a literal temp folder). The leading character
# class keeps URLs and relative paths out.
_ABSOLUTE = re.compile(r"(?<![\w.:/~-])/(?:" + "|".join(["wo" + "rk", "ho" + "me", "ro" + "ot", "t" + "mp",
                                                         "Us" + "ers"]) + r")/"
                       + r"|[A-Za-z]:\\\\?Us" + r"ers\\")
# Reading material outside the repository, by its file names and folder.
_OUTSIDE = re.compile("|".join([
    r"\bREFER" + r"ENCES\b",                 # the shared summary, in any spelling of its name
    r"\bDES" + r"IGN\.md\b",
    r"\bSTY" + r"LE\.md\b",
    r"(?<![\w-])sha" + r"red/",              # the folder holding it
    r"(?<!docs/)(?<![\w-])notes/py" + r"nec",  # a notes file that is not docs/notes/…
    r"pynec_" + r"recipes",
]))
_SECTION_CITE = re.compile(r"docs/references\.md §(\d+)")
_DOCS_CITE = re.compile(r"\bdocs/[\w/.-]+\.md\b")


def tracked_files() -> list[Path]:
    """Files under version control (git), or the source tree when the copy is not a checkout."""
    try:
        out = subprocess.run(["git", "ls-files", "-z"], cwd=ROOT, capture_output=True, check=True,
                             text=True).stdout
        files = [ROOT / p for p in out.split("\0") if p]
    except (OSError, subprocess.CalledProcessError):
        files = [p for p in ROOT.rglob("*") if p.is_file() and not SKIP_DIRS & set(p.relative_to(ROOT).parts)]
    return [p for p in files if p.suffix in TEXT_SUFFIXES and p.is_file()]


def _text(path: Path) -> str | None:
    try:
        return path.read_text(encoding="utf-8")
    except UnicodeDecodeError:
        return None


def _hits(pattern: re.Pattern) -> list[str]:
    hits = []
    for path in tracked_files():
        text = _text(path)
        if text is None:
            continue
        for n, line in enumerate(text.splitlines(), 1):
            if pattern.search(line):
                hits.append(f"{path.relative_to(ROOT)}:{n}: {line.strip()[:120]}")
    return hits


def test_the_checks_catch_what_they_are_meant_to_catch():
    # The patterns themselves, on lines written to fail and to pass.
    bad_paths = ["see /" + "work/sha" + "red/x", "/" + "home/me/f.py", "cd /" + "root/", "C:\\" + "Users\\me"]
    good_paths = ["https://example.org/home/x", "tmp_path / 'a'", "results/<name>/"]
    assert all(_ABSOLUTE.search(s) for s in bad_paths)
    assert not any(_ABSOLUTE.search(s) for s in good_paths)
    bad_cites = ["REFER" + "ENCES §3", "DES" + "IGN.md §5", "../sha" + "red/x", "(notes/py" + "nec.md)"]
    good_cites = ["docs/references.md §3", "docs/notes/pynec.md", "the shared collector"]
    assert all(_OUTSIDE.search(s) for s in bad_cites)
    assert not any(_OUTSIDE.search(s) for s in good_cites)


def test_no_absolute_machine_paths():
    hits = _hits(_ABSOLUTE)
    assert not hits, "absolute paths of a machine in tracked files:\n" + "\n".join(hits)


def test_no_citations_of_material_outside_the_repository():
    hits = _hits(_OUTSIDE)
    assert not hits, ("cite the published source or docs/references.md §n instead of:\n"
                      + "\n".join(hits))


def test_cited_reference_sections_and_docs_exist():
    references = (ROOT / "docs" / "references.md").read_text(encoding="utf-8")
    sections = set(re.findall(r"^## §(\d+)\b", references, flags=re.M))
    assert sections, "docs/references.md has numbered sections"
    missing = []
    for path in tracked_files():
        text = _text(path) or ""
        for n in _SECTION_CITE.findall(text):
            if n not in sections:
                missing.append(f"{path.relative_to(ROOT)} cites §{n}")
        for doc in _DOCS_CITE.findall(text):
            if not (ROOT / doc).is_file():
                missing.append(f"{path.relative_to(ROOT)} cites {doc}")
    assert not missing, "\n".join(sorted(set(missing)))


@pytest.mark.parametrize("path", sorted((ROOT / "tests").rglob("test_*.py")), ids=lambda p: p.name)
def test_every_test_module_names_its_sources(path):
    doc = ast.get_docstring(ast.parse(path.read_text(encoding="utf-8"))) or ""
    assert "Sources:" in doc, f"{path.name}: say in the module docstring where its check values come from"


# --- layers (docs/ARCHITECTURE.md) ----------------------------------------------------------------

#: Layer of every module; a module may import from its own layer and those below. New modules get
#: a line here and in docs/ARCHITECTURE.md.
LAYERS = {
    "constants": 1, "units": 1, "errors": 1, "reference": 1,
    "fields": 1,
    "spec": 2, "geometry": 2, "mesh": 2, "tuner": 2, "losses": 2, "receiver": 2,
    "solve": 3, "lumped": 3, "circuit": 3, "partial": 3,
    "impedance": 4, "tuning": 4, "validation": 4, "coupling": 4, "patterns": 4, "studies": 4, "explore": 4,
    "report": 5, "report_tune": 5, "report_validate": 5, "plots": 5,
    "report_html": 5, "report_couple": 5, "report_pattern": 5, "report_plots": 5, "plot_style": 5,
    "report_explore": 5,
    "cli": 6, "__init__": 6,
}
PACKAGE = ROOT / "simloop"


def _simloop_imports(path: Path) -> set[str]:
    """Modules of simloop imported anywhere in a file (top level or inside functions)."""
    names = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom) and node.module and node.module.split(".")[0] == "simloop":
            parts = node.module.split(".")
            if len(parts) > 1:
                names.add(parts[1])
            else:  # from simloop import reference / __version__
                names.update(a.name for a in node.names if (PACKAGE / f"{a.name}.py").exists())
        elif isinstance(node, ast.Import):
            names.update(a.name.split(".")[1] for a in node.names
                         if a.name.startswith("simloop.") and len(a.name.split(".")) > 1)
    return names


def _modules() -> list[Path]:
    return sorted(PACKAGE.glob("*.py"))


def test_every_module_has_a_layer_and_is_described():
    architecture = (ROOT / "docs" / "ARCHITECTURE.md").read_text(encoding="utf-8")
    for path in _modules():
        assert path.stem in LAYERS, f"simloop/{path.name}: give it a layer here and in docs/ARCHITECTURE.md"
        assert re.search(rf"\b{re.escape(path.stem)}\b", architecture), f"docs/ARCHITECTURE.md omits {path.stem}"


def test_modules_import_only_from_their_layer_and_below():
    wrong = []
    for path in _modules():
        for name in _simloop_imports(path):
            if name in LAYERS and LAYERS[name] > LAYERS.get(path.stem, 0):
                wrong.append(f"simloop/{path.name} (layer {LAYERS.get(path.stem)}) imports {name} "
                             f"(layer {LAYERS[name]})")
    assert not wrong, "\n".join(wrong)


def test_only_the_nec_module_imports_pynec():
    importers = []
    for path in _modules():
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            mods = ([a.name for a in node.names] if isinstance(node, ast.Import)
                    else [node.module or ""] if isinstance(node, ast.ImportFrom) else [])
            if any(m.split(".")[0] == "PyNEC" for m in mods):
                importers.append(path.name)
    assert set(importers) <= {"solve.py"}, importers
