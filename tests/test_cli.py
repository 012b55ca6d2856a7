"""`mkforest archive` and `mkforest verify` on a real finished run, as a user runs them."""

from __future__ import annotations

import hashlib
import io
import subprocess
import tarfile
from pathlib import Path

import jsonschema
import pytest
import yaml
from provenance_runs import RUN, SHA256SUM, copy_run, finished_run, mkforest


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    return finished_run(tmp_path_factory)


@pytest.fixture
def copy(run, tmp_path):
    """A private copy of the finished working directory, free to damage."""
    return copy_run(run[0], tmp_path / "work")


@pytest.fixture(scope="module")
def archived(run, tmp_path_factory):
    out = tmp_path_factory.mktemp("deposit")
    proc = mkforest(
        "archive",
        run[0] / "results" / RUN,
        "--author",
        "Ferrand, Ilse",
        "--author",
        "Tomas Okafor",
        "--output",
        out,
    )
    assert proc.returncode == 0, proc.stderr
    return out, proc


def one_error_sentence(proc):
    """A user mistake: exit status 2 and one line on stderr, never a traceback."""
    assert proc.returncode == 2, (proc.stdout, proc.stderr)
    lines = proc.stderr.strip().splitlines()
    assert "Traceback" not in proc.stderr
    assert lines[-1].startswith("mkforest: error: ")
    return lines[-1]


# --------------------------------------------------------------------------- verify a run folder


def test_verify_finished_run_folder(run):
    proc = mkforest("verify", run[0] / "results" / RUN)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "all match" in proc.stdout


def test_verify_detects_a_changed_input_file(copy):
    traits = copy / "data" / "traits.tsv"
    traits.write_text(traits.read_text().replace("dull", "dim", 1))
    proc = mkforest("verify", copy / "results" / RUN)
    assert proc.returncode == 1
    findings = [line for line in proc.stdout.splitlines() if line.startswith("  ")]
    assert findings == ["  changed  input traits: data/traits.tsv"]
    assert proc.stdout.rstrip().endswith("files checked: 1 changed.")


def test_verify_names_changed_missing_and_extra_results(copy):
    out = copy / "results" / RUN
    (out / "tables" / "fits.tsv").write_text((out / "tables" / "fits.tsv").read_text() + "\n")
    (out / "plots" / "support_heatmap.png").unlink()
    (out / "tables" / "my_notes.tsv").write_text("a\tb\n")
    (out / "logs" / "scratch.log").write_text("working folders are not results\n")
    proc = mkforest("verify", out)
    assert proc.returncode == 1
    assert "  changed  tables/fits.tsv" in proc.stdout
    assert "  missing  plots/support_heatmap.png" in proc.stdout
    assert "  extra    tables/my_notes.tsv" in proc.stdout
    assert "scratch.log" not in proc.stdout
    assert "1 changed, 1 missing, 1 extra" in proc.stdout


def test_verify_against_another_runs_manifest(run, copy):
    out = copy / "results" / RUN
    same = mkforest("verify", out, "--against", run[0] / "results" / RUN / "manifest.json")
    assert same.returncode == 0, same.stdout
    rates = out / "tables" / "rates.tsv"
    rates.write_text(rates.read_text().replace("\t", "\t ", 1))
    differs = mkforest("verify", out, "--against", run[0] / "results" / RUN / "manifest.json")
    assert differs.returncode == 1 and "changed  tables/rates.tsv" in differs.stdout


@pytest.mark.parametrize("case", ["missing", "no_manifest", "not_an_archive", "bad_manifest"])
def test_verify_user_mistakes_are_one_sentence(copy, tmp_path, case):
    if case == "missing":
        target = tmp_path / "nowhere"
    elif case == "no_manifest":
        target = copy / "data"
    elif case == "not_an_archive":
        target = tmp_path / "fake.tar.gz"
        target.write_text("not gzip")
    else:
        target = copy / "results" / RUN
        (target / "manifest.json").write_text("{ cut short")
    msg = one_error_sentence(mkforest("verify", target))
    assert str(target.name) in msg


# --------------------------------------------------------------------------- archive


def test_archive_needs_an_author_and_a_finished_run(run, copy, tmp_path):
    msg = one_error_sentence(
        mkforest("archive", run[0] / "results" / RUN, "--output", tmp_path / "a")
    )
    assert "--author" in msg
    assert not (tmp_path / "a").exists()
    msg = one_error_sentence(mkforest("archive", copy / "data", "--author", "Ferrand, Ilse"))
    assert "manifest.json" in msg
    one_error_sentence(mkforest("archive", copy / "results" / RUN, "--author", "Cher"))


def test_archive_refuses_results_changed_since_the_run(copy, tmp_path):
    out = copy / "results" / RUN
    (out / "methods.md").write_text("edited by hand\n")
    msg = one_error_sentence(
        mkforest("archive", out, "--author", "Ferrand, Ilse", "--output", tmp_path / "deposit")
    )
    assert "methods.md" in msg
    assert not list(tmp_path.rglob("*.tar.gz"))


def test_archive_files_and_checksums(archived):
    """The archive's checksum and the listing inside both agree with an outside sha256sum."""
    out, proc = archived
    archive = out / f"{RUN}-archive.tar.gz"
    side = out / f"{RUN}-archive.tar.gz.sha256"
    assert archive.is_file() and side.is_file() and (out / "CITATION.cff").is_file()
    assert not list(out.glob("*.part"))
    check = subprocess.run([*SHA256SUM, "-c", side.name], cwd=out, capture_output=True, text=True)
    assert check.returncode == 0, check.stdout + check.stderr
    assert hashlib.sha256(archive.read_bytes()).hexdigest() in proc.stdout
    with tarfile.open(archive) as tar:
        names = tar.getnames()
        n_files = sum(1 for m in tar.getmembers() if m.isfile())
        tar.extractall(out / "unpacked", filter="data")
    top = f"{RUN}-archive"
    for name in (
        "README.txt",
        "CITATION.cff",
        "config.yaml",
        "SHA256SUMS",
        f"results/{RUN}/manifest.json",
        f"results/{RUN}/methods.md",
        f"results/{RUN}/tables/fits.tsv",
        f"results/{RUN}/tables/trees_used.tsv",
        "inputs/trees/trees.nex",
        "inputs/traits/traits.tsv",
        "inputs/config/config.yaml",
    ):
        assert f"{top}/{name}" in names, name
    assert not any("/logs/" in n or "/fits/" in n or "/prepared/" in n for n in names)
    unpacked = out / "unpacked" / top
    sums = subprocess.run(
        [*SHA256SUM, "-c", "SHA256SUMS"], cwd=unpacked, capture_output=True, text=True
    )
    assert sums.returncode == 0, sums.stdout + sums.stderr
    assert sums.stdout.count(": OK") == n_files - 1  # every file but the listing itself
    rerun = yaml.safe_load((unpacked / "config.yaml").read_text())
    assert rerun["trees"]["file"] == "inputs/trees/trees.nex"
    assert rerun["traits"]["file"] == "inputs/traits/traits.tsv"
    assert mkforest("verify", archive).returncode == 0
    assert mkforest("verify", unpacked).returncode == 0


def _damaged_copy(src: Path, dst: Path, top: str):
    """The archive member by member, with fits.tsv altered, one plot left out and one
    file slipped in."""
    with tarfile.open(src) as tin, tarfile.open(dst, "w:gz") as tout:
        for m in tin.getmembers():
            if not m.isfile():
                tout.addfile(m)
                continue
            data = tin.extractfile(m).read()
            if m.name.endswith("plots/support_weights.png"):
                continue
            if m.name.endswith("tables/fits.tsv"):
                data = data.replace(b"True", b"False", 1)
            m.size = len(data)
            tout.addfile(m, io.BytesIO(data))
        extra = tarfile.TarInfo(f"{top}/results/{RUN}/tables/smuggled.tsv")
        extra.size = 4
        tout.addfile(extra, io.BytesIO(b"x\ty\n"))


def test_verify_finds_every_change_inside_an_archive(archived, tmp_path):
    out, _ = archived
    src = out / f"{RUN}-archive.tar.gz"
    top = f"{RUN}-archive"
    bad = tmp_path / src.name
    _damaged_copy(src, bad, top)
    (tmp_path / (src.name + ".sha256")).write_text((out / (src.name + ".sha256")).read_text())
    proc = mkforest("verify", bad)
    assert proc.returncode == 1
    assert f"changed  {src.name} (its checksum differs from {src.name}.sha256)" in proc.stdout
    assert f"changed  {top}/results/{RUN}/tables/fits.tsv" in proc.stdout
    assert f"missing  {top}/results/{RUN}/plots/support_weights.png" in proc.stdout
    assert f"extra    {top}/results/{RUN}/tables/smuggled.tsv" in proc.stdout
    assert "3 changed" not in proc.stdout and "2 changed, 1 missing, 1 extra" in proc.stdout


# --------------------------------------------------------------------------- CITATION.cff

# Rules of Citation File Format 1.2.0, transcribed from its JSON schema (schema.json of
# github.com/citation-file-format/citation-file-format, version 1.2.0): the root keys and
# their types, persons, entities, identifiers and references as this archive uses them.
_PERSON = {
    "type": "object",
    "additionalProperties": False,
    "properties": {
        k: {"type": "string", "minLength": 1}
        for k in (
            "family-names",
            "given-names",
            "name-particle",
            "name-suffix",
            "affiliation",
            "alias",
        )
    },
}
_ENTITY = {
    "type": "object",
    "required": ["name"],
    "properties": {
        "name": {"type": "string", "minLength": 1},
        "city": {"type": "string", "minLength": 1},
    },
}
_PEOPLE = {
    "type": "array",
    "minItems": 1,
    "uniqueItems": True,
    "items": {"anyOf": [_PERSON, _ENTITY]},
}
CFF_1_2_0 = {
    "type": "object",
    "additionalProperties": False,
    "required": ["authors", "cff-version", "message", "title"],
    "properties": {
        "cff-version": {"type": "string", "pattern": r"^1\.2\.0$"},
        "message": {"type": "string", "minLength": 1},
        "title": {"type": "string", "minLength": 1},
        "type": {"enum": ["dataset", "software"]},
        "authors": _PEOPLE,
        "abstract": {"type": "string", "minLength": 1},
        "date-released": {
            "type": "string",
            "pattern": r"^[0-9]{4}-(0[1-9]|1[012])-(0[1-9]|[12][0-9]|3[01])$",
        },
        "keywords": {
            "type": "array",
            "minItems": 1,
            "uniqueItems": True,
            "items": {"type": "string", "minLength": 1},
        },
        "identifiers": {
            "type": "array",
            "minItems": 1,
            "uniqueItems": True,
            "items": {
                "type": "object",
                "additionalProperties": False,
                "required": ["type", "value"],
                "properties": {
                    "type": {"enum": ["doi", "url", "swh", "other"]},
                    "value": {"type": "string", "minLength": 1},
                    "description": {"type": "string", "minLength": 1},
                },
            },
        },
        "references": {
            "type": "array",
            "minItems": 1,
            "uniqueItems": True,
            "items": {
                "type": "object",
                "required": ["authors", "title", "type"],
                "properties": {
                    "authors": _PEOPLE,
                    "title": {"type": "string", "minLength": 1},
                    "type": {"enum": ["article", "book", "software", "data"]},
                    "year": {"type": "integer"},
                    "volume": {"type": "integer"},
                    "start": {"type": "integer"},
                    "end": {"type": "integer"},
                    "journal": {"type": "string", "minLength": 1},
                    "edition": {"type": "string", "minLength": 1},
                    "version": {"anyOf": [{"type": "string", "minLength": 1}, {"type": "number"}]},
                    "publisher": _ENTITY,
                },
            },
        },
        "version": {"anyOf": [{"type": "string", "minLength": 1}, {"type": "number"}]},
    },
}


def test_citation_file_follows_the_format(run, archived):
    out, _ = archived
    side = yaml.safe_load((out / "CITATION.cff").read_text())
    with tarfile.open(out / f"{RUN}-archive.tar.gz") as tar:
        inner_bytes = tar.extractfile(f"{RUN}-archive/CITATION.cff").read()
    inner = yaml.safe_load(inner_bytes)
    for doc in (side, inner):
        jsonschema.validate(doc, CFF_1_2_0)
        assert doc["type"] == "dataset"
        assert doc["authors"][0] == {"family-names": "Ferrand", "given-names": "Ilse"}
        assert doc["authors"][1] == {"family-names": "Okafor", "given-names": "Tomas"}
        titles = [r["title"] for r in doc["references"]]
        assert any(t.startswith("Evolutionary trees from DNA sequences") for t in titles)
    archive_sha = hashlib.sha256((out / f"{RUN}-archive.tar.gz").read_bytes()).hexdigest()
    assert {
        "type": "other",
        "value": f"sha256:{archive_sha}",
        "description": f"SHA-256 of {RUN}-archive.tar.gz",
    } in side["identifiers"]
    manifest_sha = hashlib.sha256((run[0] / "results" / RUN / "manifest.json").read_bytes())
    assert [i["value"] for i in inner["identifiers"]] == [f"sha256:{manifest_sha.hexdigest()}"]
    assert f"sha256:{manifest_sha.hexdigest()}" in [i["value"] for i in side["identifiers"]]


def test_command_line_usage_errors_exit_2():
    proc = mkforest()
    assert proc.returncode == 2 and "usage: mkforest" in proc.stderr
    proc = mkforest("verify")
    assert proc.returncode == 2 and "Traceback" not in proc.stderr
