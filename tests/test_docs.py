"""The documentation site's sources: present, complete for the public API, and well formed.

The full Sphinx build (API pages from the docstrings, theory pages, the gallery run) is in
``.ci/run`` (``sphinx -W``); these checks are cheap and run in the default suite, so that a public
name added without an API entry, or a theory page left out of the table of contents, fails here.
"""

from __future__ import annotations

import ast
import importlib
import inspect
import re
from pathlib import Path

import pytest

import popdens

DOCS = Path(__file__).resolve().parents[1] / "popdens" / "docs"
DIRECTIVE = re.compile(r"^\.\. (?:auto(?:function|class|exception|data|module)|data|function|class|module)::\s+(\S+)\s*$",
                       re.MULTILINE)


def documented_names() -> set[str]:
    """Fully qualified targets of the object directives on the API pages."""
    return {m for page in (DOCS / "api").glob("*.rst") for m in DIRECTIVE.findall(page.read_text(encoding="utf-8"))}


def toctree_entries(page: Path) -> list[str]:
    """Entries of the toctree directives of one page."""
    out, inside = [], False
    for line in page.read_text(encoding="utf-8").splitlines():
        if line.startswith(".. toctree::"):
            inside = True
        elif inside and line.strip() and not line.startswith("   "):
            inside = False
        elif inside and line.strip() and not line.strip().startswith(":"):
            out.append(line.strip())
    return out


def test_sources_exist():
    for rel in ("conf.py", "index.rst", "conventions.rst", "api/index.rst", "theory/index.rst",
                "examples/GALLERY_HEADER.rst"):
        assert (DOCS / rel).is_file(), rel
    assert sorted((DOCS / "examples").glob("plot_*.py")), "the gallery has no example"


def test_every_public_name_is_on_an_api_page():
    names = documented_names()
    missing = [n for n in popdens.__all__ if f"popdens.{n}" not in names]
    plotting = importlib.import_module("popdens.plotting")
    for module in (popdens.drive, popdens.hazard, plotting):  # documented member by member
        missing += [f"{module.__name__.split('.')[-1]}.{n}" for n in module.__all__
                    if f"popdens.{module.__name__.split('.')[-1]}.{n}" not in names]
    assert missing == [], f"add these to an API page in popdens/docs/api/: {missing}"


def resolve(target: str):
    """The object a dotted name on an API page stands for (modules imported as needed)."""
    parts = target.split(".")
    for i in range(len(parts), 0, -1):
        try:
            obj = importlib.import_module(".".join(parts[:i]))
        except ImportError:
            continue
        for part in parts[i:]:
            obj = getattr(obj, part)  # AttributeError names a stale entry
        return obj
    raise AssertionError(f"{target} names nothing importable")


def test_api_pages_name_only_existing_objects():
    for target in documented_names():
        resolve(target)


def test_every_public_object_has_a_docstring():
    undocumented = [n for n in popdens.__all__ if n != "__version__" and not inspect.getdoc(getattr(popdens, n))]
    assert undocumented == []


@pytest.mark.parametrize("folder", ["api", "theory"])
def test_every_page_is_in_its_table_of_contents(folder):
    entries = set(toctree_entries(DOCS / folder / "index.rst"))
    pages = {p.stem for p in (DOCS / folder).glob("*.rst")} - {"index"}
    assert pages - entries == set()
    assert entries - pages == set()


def test_theory_pages_state_equations_and_cite_their_sources():
    for page in sorted((DOCS / "theory").glob("*.rst")):
        if page.stem == "index":
            continue
        text = page.read_text(encoding="utf-8")
        assert ".. math::" in text, page.name
        refs = text.partition("\nReferences\n----------\n")[2]
        # each entry a full citation: authors, (year), title, venue
        entries = [e for e in refs.split("\n* ") if e.strip()]
        assert entries, f"{page.name} has no References section"
        for e in entries:
            assert re.search(r"\((?:19|20)\d\d\)\.\s+\S", e), f"{page.name}: not a full citation: {e[:80]}"


def test_gallery_examples_have_a_title_and_run_quickly_by_construction():
    for script in sorted((DOCS / "examples").glob("plot_*.py")):
        doc = ast.get_docstring(ast.parse(script.read_text(encoding="utf-8")))
        assert doc, f"{script.name}: a gallery example starts with a docstring (its title)"
        title, underline = doc.splitlines()[:2]
        assert title and set(underline) == {"="} and len(underline) >= len(title), script.name
        # small twins only: the whole gallery runs in seconds during the docs build
        for n in re.findall(r"\bn\s*=\s*([\d_]+)", script.read_text(encoding="utf-8")):
            assert int(n.replace("_", "")) <= 50_000, f"{script.name}: n = {n} is too large for the gallery"


def build_checks() -> set[str]:
    """The numpydoc checks the docs build applies (``numpydoc_validation_checks`` in conf.py)."""
    for node in ast.parse((DOCS / "conf.py").read_text(encoding="utf-8")).body:
        if isinstance(node, ast.Assign) and any(getattr(t, "id", "") == "numpydoc_validation_checks"
                                                for t in node.targets):
            return set(ast.literal_eval(node.value))
    raise AssertionError("conf.py sets no numpydoc_validation_checks")


def documented_objects() -> list[str]:
    """Dotted names of what the API pages show: the documented names and their public members with a docstring."""
    out = []
    for target in sorted(documented_names()):
        obj = resolve(target)
        if inspect.ismodule(obj) or target == "popdens.__version__":
            continue
        out.append(target)
        if inspect.isclass(obj):
            out += [f"{target}.{k}" for k, member in vars(obj).items()
                    if not k.startswith("_") and (callable(member) or isinstance(member, property))
                    and inspect.getdoc(getattr(obj, k, None))]
    return out


def numpydoc_failures(names, checks) -> list[str]:
    validate = pytest.importorskip("numpydoc.validate").validate
    return [f"{name}: {code} {msg}" for name in names for code, msg in validate(name)["errors"] if code in checks]


def test_public_docstrings_pass_the_checks_of_the_docs_build():
    """The same numpydoc checks as the ``sphinx -W`` build in CI, so a docstring that would break it
    fails here first (skipped where numpydoc, from the ``docs`` extra, is not installed)."""
    failures = numpydoc_failures(documented_objects(), build_checks())
    assert failures == [], "fix these docstrings (numpydoc format):\n" + "\n".join(failures)


def test_the_docstring_check_flags_a_bad_docstring(monkeypatch):
    import sys
    import types

    def bad(x):
        """Do a thing.

        Returns
        -------
        int

        Parameters
        ----------
        x : float
        """

    module = types.ModuleType("popdens_docs_probe")
    module.bad = bad
    bad.__module__ = module.__name__
    monkeypatch.setitem(sys.modules, module.__name__, module)
    found = numpydoc_failures([f"{module.__name__}.bad"], build_checks())
    assert any(" GL07 " in f for f in found) and any(" PR07 " in f for f in found) and any(" RT03 " in f for f in found)
