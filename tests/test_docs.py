"""The manual (docs/, built by MkDocs) and the README say what the program does.

The site builds strictly and the build fails on a broken link or a page left out of the
navigation; the README is short and its links lead somewhere; the configuration page's
error example is what the workflow prints; the Python page's functions exist and its
example runs; every top-level config key has a row in the configuration reference.
The project's own rules; no outside value.
"""

from __future__ import annotations

import importlib
import re
import shutil
import subprocess
import sys
from pathlib import Path

import yaml
from workflow_helpers import REPO, run_snakemake, tiny_config

from mkforest.data.config import SCHEMA

DOCS = REPO / "docs"
MKDOCS = str(Path(sys.executable).with_name("mkdocs"))
# the config file's path as the configuration page shows it
SHOWN_PATH = "/home/you/mkforest/my_config.yaml"


def build(folder: Path) -> subprocess.CompletedProcess:
    return subprocess.run(
        [MKDOCS, "build", "--strict", "--site-dir", str(folder / "site")],
        cwd=folder,
        capture_output=True,
        text=True,
        timeout=120,
    )


def test_site_builds_strictly_and_fails_on_a_broken_link_or_a_page_out_of_the_nav(tmp_path):
    shutil.copytree(DOCS, tmp_path / "docs")
    shutil.copy(REPO / "mkdocs.yml", tmp_path / "mkdocs.yml")
    proc = build(tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert (tmp_path / "site" / "index.html").is_file()

    page = tmp_path / "docs" / "models.md"
    text = page.read_text()
    for broken in ("[gone](no_such_page.md)", "[gone](pairs.md#no-such-section)"):
        page.write_text(text + f"\nSee {broken}.\n")
        proc = build(tmp_path)
        assert proc.returncode != 0 and "models.md" in proc.stderr, (broken, proc.stderr)
    page.write_text(text)

    (tmp_path / "docs" / "orphan.md").write_text("# A page nobody lists\n")
    proc = build(tmp_path)
    assert proc.returncode != 0 and "orphan.md" in proc.stderr, proc.stderr


def nav_pages(nav) -> list:
    """The page files of mkdocs.yml's nav, sections opened (a page is a string, or a
    one-item mapping of title to a page or to a list)."""
    if isinstance(nav, str):
        return [nav]
    if isinstance(nav, dict):
        return [p for v in nav.values() for p in nav_pages(v)]
    return [p for item in nav for p in nav_pages(item)]


def test_every_page_is_in_the_navigation_and_every_listed_page_exists():
    config = yaml.safe_load((REPO / "mkdocs.yml").read_text())
    listed = nav_pages(config["nav"])
    on_disk = [p.relative_to(DOCS).as_posix() for p in DOCS.rglob("*.md")]
    assert len(listed) == len(set(listed)), "a page is listed twice in mkdocs.yml's nav"
    assert sorted(listed) == sorted(on_disk)
    assert nav_pages([{"A": "a.md"}, {"B": [{"C": "b/c.md"}, "d.md"]}]) == [
        "a.md",
        "b/c.md",
        "d.md",
    ]


def test_readme_is_short_and_its_links_lead_to_files():
    text = (REPO / "README.md").read_text()
    assert len(text.splitlines()) <= 250
    # the quick start's two commands, each in a code block line of its own
    assert re.search(r"^make demo\b", text, re.M) and re.search(r"^make test\b", text, re.M)
    links = re.findall(r"\]\(([^)#]+)(?:#[^)]*)?\)", text)
    assert any(link.startswith("docs/") for link in links)
    missing = [link for link in links if "://" not in link and not (REPO / link).exists()]
    assert not missing, f"README.md links to files that do not exist: {missing}"


def test_readme_commands_are_make_targets_and_setup_comes_before_the_venv():
    text = (REPO / "README.md").read_text()
    makefile = (REPO / "Makefile").read_text()
    targets = set(re.findall(r"^([a-z][\w-]*):", makefile, re.M))
    named = set(re.findall(r"\bmake ([a-z][\w-]*)", text))
    assert {"demo", "test", "setup", "init", "run", "docs"} <= named
    assert not named - targets, f"README.md names make targets that do not exist: {named - targets}"
    # nothing calls .venv/bin/... before a command that makes .venv has been given
    first_venv = text.find(".venv/bin/")
    first_setup = min(text.find(f"make {t}") for t in ("setup", "demo", "test"))
    assert first_venv == -1 or first_setup < first_venv


def test_config_error_example_is_what_the_workflow_prints(tmp_path):
    """The example on the configuration page, character for character, from a real
    dry run of a config with the same two mistakes."""
    page = (DOCS / "configuration.md").read_text()
    shown = [line for line in page.splitlines() if line.startswith("mkforest: config file")]
    assert len(shown) == 2, shown
    models = {
        "one_rate": {"kind": "equal"},
        "loss": {
            "kind": "custom",
            "applies_to": ["glw"],
            "transitions": {"glowing -> dull": "loss"},
        },
    }
    cfg = tiny_config(tmp_path, fitting={"strats": 2}, models=models)
    proc = run_snakemake(tmp_path, cfg, "--dry-run")
    assert proc.returncode == 2, proc.stdout + proc.stderr
    printed = [
        line.replace(str(cfg), SHOWN_PATH)
        for line in proc.stderr.splitlines()
        if line.startswith("mkforest:")
    ]
    assert printed == shown


def test_python_page_names_functions_that_exist_and_its_example_runs(tmp_path, monkeypatch):
    page = (DOCS / "python.md").read_text()
    names = sorted(set(re.findall(r"`(mkforest(?:\.\w+)+)`", page)))
    assert len(names) >= 10, names
    missing = []
    for name in names:
        try:
            importlib.import_module(name)  # a module
        except ModuleNotFoundError:
            module, attr = name.rsplit(".", 1)
            try:
                if not hasattr(importlib.import_module(module), attr):
                    missing.append(name)
            except ModuleNotFoundError:
                missing.append(name)
    assert not missing, f"docs/python.md names what the package does not have: {missing}"

    example = page.split("```python\n", 1)[1].split("```", 1)[0]
    (tmp_path / "my_trees.nex").write_text(
        "#NEXUS\nbegin trees;\n"
        "tree t0 = [&R] (((a:1,b:1):1,c:2):1,(d:1.5,e:1.5):1.5);\n"
        "tree t1 = [&R] (((a:1,c:1):1,b:2):1,(d:1.2,e:1.2):1.8);\nend;\n"
    )
    (tmp_path / "my_traits.csv").write_text(
        "taxon,glow\na,glowing\nb,dull\nc,glowing\nd,dull\ne,dull\n"
    )
    monkeypatch.chdir(tmp_path)
    printed = []
    exec(example, {"print": lambda *a: printed.append(a)})
    assert [row[0] for row in printed] == [0, 1]  # one line per tree, by file position


def test_every_top_level_config_key_has_a_row_in_the_configuration_reference():
    schema = yaml.safe_load(SCHEMA.read_text())
    page = (DOCS / "configuration.md").read_text()
    first_cells = " ".join(
        line.split("|")[1] for line in page.splitlines() if line.startswith("| `")
    )
    documented = set(re.findall(r"`(\w+)", first_cells))
    missing = [key for key in schema["properties"] if key not in documented]
    assert not missing, (
        f"top-level config keys without a row in docs/configuration.md: {missing}; "
        "add a row (and link to the page that describes it)"
    )
