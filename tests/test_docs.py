"""The documentation site and the set-up a new user follows stay complete and true.

Static checks (the build itself, which executes the notebooks, is .ci/run's third step):
every notebook is a tutorial, every public name is in the API reference, the site is
built with warnings as errors after the tests, and the extras install what the README
and the site promise.
"""

import re
import sys
from pathlib import Path

import pytest

import massfit

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10
    import tomli as tomllib

ROOT = Path(__file__).resolve().parents[1]
DOCS = ROOT / "docs"


def _extras():
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]
    return project["optional-dependencies"]


def _names(requirements):
    return {re.split(r"[<>=!~;\[ ]", r, maxsplit=1)[0].lower() for r in requirements}


def _toctree_entries(page):
    text = page.read_text()
    entries = []
    for block in re.findall(r"```\{toctree\}(.*?)```", text, flags=re.S):
        entries += [line.strip() for line in block.splitlines()
                    if line.strip() and not line.strip().startswith(":")]
    return entries


def test_every_notebook_is_a_tutorial():
    notebooks = sorted(p.stem for p in (ROOT / "notebooks").glob("*.ipynb"))
    assert notebooks
    entries = _toctree_entries(DOCS / "tutorials" / "index.md")
    assert sorted(e for e in entries if e != "examples") == notebooks


def test_the_site_holds_the_reference_pages():
    entries = _toctree_entries(DOCS / "index.md")
    for page in ("install", "tutorials/index", "guide/fitting", "guide/inputs", "guide/model",
                 "guide/trust", "conventions", "validation", "api"):
        assert page in entries
        assert list(DOCS.glob(page + ".*")), page
    # The conventions page carries the project's conventions, formulas included.
    conventions = (DOCS / "conventions.md").read_text()
    for text in ("Thiele–Innes", "P² = 4π² a³ / (G (M₁ + m₂))",
                 "v_primary   = γ − m₂/(M₁ + m₂)", "15.865th to the 84.135th percentile"):
        assert text in conventions


def test_every_public_name_is_in_the_api_reference():
    api = (DOCS / "api.rst").read_text()
    missing = [name for name in massfit.__all__ if name != "__version__"
               and not re.search(rf"::\s+massfit\.{name}\s*$", api, flags=re.M)]
    assert not missing, f"not in docs/api.rst: {missing}"


def test_ci_builds_the_site_with_warnings_as_errors_after_the_tests():
    script = (ROOT / ".ci" / "run").read_text()
    build = script.index("python -m sphinx -W")
    assert script.index("run_step -m slow\n") < build
    assert '".[test,docs]"' in script
    assert "documentation build took" in script[build:]


def test_extras_install_what_the_docs_promise():
    extras = _extras()
    assert "jupyterlab" in _names(extras["notebooks"])
    assert {"sphinx", "myst-nb", "furo"} <= _names(extras["docs"])
    assert "arviz" in _names(extras["arviz"]) and "arviz" in _names(extras["test"])
    # The nested engine's library: its own extra, and in the test extra so that the
    # nested engine's tests run in CI.
    assert "dynesty" in _names(extras["nested"]) and "dynesty" in _names(extras["test"])
    assert "arviz" not in _names(tomllib.loads(
        (ROOT / "pyproject.toml").read_text())["project"]["dependencies"])


def test_readme_says_how_to_set_up_and_open_the_notebooks():
    readme = (ROOT / "README.md").read_text()
    assert "python3 -m venv" in readme and "python3-venv" in readme
    assert 'pip install ".[notebooks]"' in readme and "jupyter lab notebooks/" in readme
    for page in ("docs/install.md", "docs/guide/fitting.md", "docs/conventions.md",
                 "docs/validation.md"):
        assert f"({page}" in readme, page


@pytest.mark.parametrize("page", sorted(str(p.relative_to(DOCS)) for p in DOCS.glob("**/*.md")
                                         if "_build" not in p.parts))
def test_links_between_pages_resolve(page):
    text = (DOCS / page).read_text()
    for target in re.findall(r"\]\(([^)#:]+\.(?:md|rst))(?:#[^)]*)?\)", text):
        assert ((DOCS / page).parent / target).resolve().exists(), \
            f"{page} links to missing {target}"


def test_every_page_is_in_a_table_of_contents():
    listed = {"index"} | set(_toctree_entries(DOCS / "index.md")) | {
        "tutorials/" + e for e in _toctree_entries(DOCS / "tutorials" / "index.md")}
    pages = {str(p.relative_to(DOCS).with_suffix("")) for p in DOCS.glob("**/*.md")
             if "_build" not in p.parts}
    assert pages <= listed, f"not in a table of contents: {sorted(pages - listed)}"


def test_readme_links_resolve():
    readme = (ROOT / "README.md").read_text()
    for target in re.findall(r"\]\(([^)#:]+)(?:#[^)]*)?\)", readme):
        assert (ROOT / target).exists(), f"README links to missing {target}"
