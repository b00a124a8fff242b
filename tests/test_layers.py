"""The import layers of DEVELOPERS.md ("Layers, from the bottom"), checked by walking the imports.

Every module of the package belongs to exactly one layer of the table in DEVELOPERS.md; a module
may import from its own layer and the layers below, never from a layer above (e.g. the workbook
never imports the command line). Every import counts, also one inside a function. The table is
read from DEVELOPERS.md itself, so the documentation and this check cannot disagree.

Private names (a leading underscore) are not imported from another module, nor reached as an
attribute of an imported module. Today's exceptions are listed in ``PRIVATE_EXCEPTIONS`` with the
reason each remains; the list only shrinks (a fixed exception must be deleted from it, and the
count below may only go down). Common practice, no source.
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "studykit"

#: (importing module, imported module, private name) -> why it is still there
PRIVATE_EXCEPTIONS: dict[tuple[str, str, str], str] = {}
#: the number of exceptions may only go down
MAX_EXCEPTIONS = 0


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


MODULES = {_module_name(p): p for p in sorted(PACKAGE.rglob("*.py"))}


def _layers() -> list[tuple[str, list[str]]]:
    """(layer name, module patterns) from the layer table of DEVELOPERS.md, bottom first."""
    text = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8")
    start = text.index("Layers, from the bottom:")
    rows = []
    for line in text[start:].splitlines()[1:]:
        if not line.startswith("|"):
            if rows:
                break
            continue
        cells = [c.strip() for c in line.strip("|").split("|")]
        if cells[0] in ("layer", "") or set(cells[0]) <= {"-"}:
            continue
        paths = re.findall(r"`(studykit/[^`]*)`", cells[1])
        rows.append((cells[0], paths))
    return rows


def _matches(module: str, pattern: str) -> bool:
    pattern = pattern.rstrip("*").rstrip("/")
    if pattern.endswith(".py"):
        return _module_name(ROOT / pattern) == module
    prefix = pattern.replace("/", ".")
    return module == prefix or module.startswith(prefix + ".")


def _layer_of(module: str, layers) -> int:
    found = [i for i, (_, pats) in enumerate(layers) if any(_matches(module, p) for p in pats)]
    assert len(found) == 1, (
        f"{module} is in {len(found)} layers of the DEVELOPERS.md table; it must be in one"
    )
    return found[0]


def _imports(module: str, path: Path):
    """(imported module, name or None, line) for every studykit import, and private attribute
    access on imported studykit modules."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    package = module if path.name == "__init__.py" else module.rpartition(".")[0]
    aliases: dict[str, str] = {}
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")[: len(package.split(".")) - node.level + 1]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target.split(".")[0] != "studykit":
                continue
            for a in node.names:
                sub = f"{target}.{a.name}"
                if sub in MODULES:
                    aliases[a.asname or a.name] = sub
                    out.append((sub, None, node.lineno))
                else:
                    out.append((target, a.name, node.lineno))
        elif isinstance(node, ast.Import):
            for a in node.names:
                if a.name.split(".")[0] == "studykit":
                    if a.asname:
                        aliases[a.asname] = a.name
                    out.append((a.name, None, node.lineno))
    for node in ast.walk(tree):
        if (
            isinstance(node, ast.Attribute)
            and isinstance(node.value, ast.Name)
            and node.value.id in aliases
            and node.attr.startswith("_")
            and not node.attr.startswith("__")
        ):
            out.append((aliases[node.value.id], node.attr, node.lineno))
    return out


def test_every_module_is_in_one_layer():
    layers = _layers()
    assert len(layers) >= 5, "the layer table of DEVELOPERS.md was not found"
    for module in MODULES:
        _layer_of(module, layers)


def test_no_module_imports_a_higher_layer():
    layers = _layers()
    wrong = []
    for module, path in MODULES.items():
        own = _layer_of(module, layers)
        for target, _name, line in _imports(module, path):
            if target not in MODULES:  # e.g. "studykit" itself
                target = (
                    target.rpartition(".")[0] if target.rpartition(".")[0] in MODULES else target
                )
            if target not in MODULES:
                continue
            theirs = _layer_of(target, layers)
            if theirs > own:
                wrong.append(
                    f"{path.relative_to(ROOT)}:{line}: {module} ({layers[own][0]}) "
                    f"imports {target} ({layers[theirs][0]})"
                )
    assert not wrong, "a lower layer imports a higher one:\n" + "\n".join(wrong)


def _private_imports():
    found = {}
    for module, path in MODULES.items():
        for target, name, line in _imports(module, path):
            if name and name.startswith("_") and not name.startswith("__") and target != module:
                found.setdefault((module, target, name), f"{path.relative_to(ROOT)}:{line}")
    return found


def test_no_private_names_across_modules():
    found = _private_imports()
    new = {k: v for k, v in found.items() if k not in PRIVATE_EXCEPTIONS}
    assert not new, (
        "private names used from another module (make the name public where it "
        "is defined, or move the code):\n"
        + "\n".join(f"{v}: {k[0]} uses {k[1]}.{k[2]}" for k, v in sorted(new.items()))
    )


def test_private_exceptions_only_shrink():
    found = _private_imports()
    stale = [k for k in PRIVATE_EXCEPTIONS if k not in found]
    assert not stale, f"fixed, delete from PRIVATE_EXCEPTIONS: {stale}"
    assert len(PRIVATE_EXCEPTIONS) <= MAX_EXCEPTIONS
    assert all(reason.strip() for reason in PRIVATE_EXCEPTIONS.values())


def test_the_checker_sees_a_violation(tmp_path):
    # the walker itself: an import inside a function and a private attribute are both found
    path = tmp_path / "m.py"
    path.write_text(
        "import studykit.stats.fit as fm\n\ndef f():\n"
        "    from studykit.cli.gauge import run\n    return fm._x, run\n"
    )
    found = _imports("studykit.stats.m", path)
    assert ("studykit.cli.gauge", "run", 4) in found
    assert ("studykit.stats.fit", "_x", 5) in found


def test_scipy_stats_is_imported_on_first_use_only():
    # Project convention (DEVELOPERS.md, "scipy.stats is imported on first use only"): importing
    # the analysis layer must not import scipy.stats; a fresh interpreter shows it.
    import subprocess
    import sys

    code = "import sys, studykit.analysis, studykit.cli; print('scipy.stats' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
    from studykit.stats.lazy import scipy_stats

    assert scipy_stats.norm.ppf(0.5) == 0.0  # the stand-in reaches the real module
