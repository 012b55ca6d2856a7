"""Provenance of a run: its manifest, checks against it, and a citable archive.

``results/<run>/manifest.json`` holds the SHA-256 of every input and result
file, the resolved config (defaults filled in), the trees used, software
versions and the platform. Only its ``invocation`` block (command line,
working directory, start and end times) changes from one identical run to the
next; result files carry no times, so their checksums repeat.

An archive ``<run>-archive.tar.gz`` holds one folder::

    <run>-archive/
      README.txt        what is here; how to check it and run it again
      CITATION.cff      citation metadata (Citation File Format 1.2.0)
      config.yaml       the resolved config, its input paths pointing into inputs/
      inputs/<role>/    the trees, trait table (and reference tree) and the config file(s)
      results/<run>/    manifest.json, methods.md, tables/, plots/
      SHA256SUMS        checksum of every other file (``sha256sum -c SHA256SUMS`` reads it)

Beside the archive: ``<run>-archive.tar.gz.sha256`` and ``CITATION.cff``
naming the archive's checksum. ``verify`` rechecks an archive, an unpacked
archive or a run folder and names every changed, missing or extra file.
"""

from __future__ import annotations

import copy
import hashlib
import importlib.metadata
import io
import json
import os
import platform
import tarfile
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path, PurePosixPath

import yaml

from ..data.config import tree_sets
from ..data.trees import describe_rooting
from ..errors import InputError

MANIFEST = "manifest.json"
SUMS = "SHA256SUMS"
FORMAT_VERSION = 1
# Config keys that name input files: (role, key path). A stage that adds a file
# key adds it here, so the manifest hashes it and the archive packs it.
INPUT_KEYS = (
    ("trees", ("trees", "file")),
    ("traits", ("traits", "file")),
    ("reference_tree", ("ancestral", "reference_tree")),
)
# Distribution names of the software recorded in the manifest.
PACKAGES = (
    "mkforest",
    "snakemake",
    "numpy",
    "scipy",
    "dendropy",
    "pandas",
    "matplotlib",
    "numba",
    "pyyaml",
)
KEYWORDS = [
    "phylogenetic comparative methods",
    "Mk model",
    "categorical traits",
    "model selection",
    "phylogenetic uncertainty",
]


# --------------------------------------------------------------------------- checksums


def sha256_file(path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def sha256_bytes(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def file_record(path, name: str) -> dict:
    path = Path(path)
    return {"path": name, "sha256": sha256_file(path), "bytes": path.stat().st_size}


def now_utc() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


# --------------------------------------------------------------------------- the manifest


def input_keys(config: dict) -> tuple:
    """INPUT_KEYS plus one ('tree_set.<name>', key path) per tree set of ``tree_sets``."""
    return INPUT_KEYS + tuple(
        (f"tree_set.{n}", ("tree_sets", n, "file")) for n in (config.get("tree_sets") or {})
    )


def input_files(config: dict) -> list:
    """[(role, path)] of the input files a config names."""
    out = []
    for role, keys in input_keys(config):
        value = config
        for k in keys:
            value = value.get(k) if isinstance(value, dict) else None
        if value:
            out.append((role, str(value)))
    return out


def software_versions() -> dict:
    out = {"python": platform.python_version()}
    for dist in PACKAGES:
        try:
            out[dist] = importlib.metadata.version(dist)
        except importlib.metadata.PackageNotFoundError:
            out[dist] = "not installed"
    return out


def source_revision() -> dict:
    """mkforest's version and, when it runs from a git checkout, the commit (and whether
    tracked files differ from it). Recorded so a result can be traced to the exact code."""
    import subprocess

    out = {
        "version": software_versions().get("mkforest", "not installed"),
        "git_commit": None,
        "uncommitted_changes": None,
    }
    repo = Path(__file__).resolve().parents[2]
    if not (repo / ".git").exists():
        return out
    try:
        head = subprocess.run(
            ["git", "-C", str(repo), "rev-parse", "HEAD"],
            capture_output=True,
            text=True,
            timeout=20,
        )
        dirty = subprocess.run(
            ["git", "-C", str(repo), "status", "--porcelain", "--untracked-files=no"],
            capture_output=True,
            text=True,
            timeout=20,
        )
    except (OSError, subprocess.SubprocessError):
        return out
    if head.returncode == 0:
        out["git_commit"] = head.stdout.strip()
        out["uncommitted_changes"] = bool(dirty.stdout.strip()) if dirty.returncode == 0 else None
    return out


def relative_command(command, directory) -> list:
    """The command line with the working directory written as '.', so the manifest holds no
    absolute path of the machine it ran on."""
    base = str(Path(directory).resolve())
    out = []
    for arg in command:
        arg = str(arg)
        if arg == base:
            arg = "."
        elif arg.startswith(base + os.sep):
            arg = os.path.relpath(arg, base)
        out.append(arg)
    return out


def platform_info() -> dict:
    return {
        "system": platform.system(),
        "release": platform.release(),
        "machine": platform.machine(),
        "platform": platform.platform(),
        "python_implementation": platform.python_implementation(),
    }


def _posix(path) -> str:
    return PurePosixPath(Path(path).as_posix()).as_posix()


def build_manifest(config: dict, run_dir, outputs, inputs, trees_used, invocation: dict) -> dict:
    """The manifest of a finished run.

    outputs: paths of the result files (inside run_dir; a folder of figures stands for
    every file in it); inputs: [(role, path)] with paths as written in the config
    (relative to the working directory) or to the config files; trees_used: path of
    tables/trees_used.tsv.
    """
    run_dir = Path(run_dir)
    records = []
    files = [  # Snakemake's .snakemake_timestamp in a folder output is not a result
        f for p in outputs for f in (sorted(Path(p).rglob("[!.]*")) if Path(p).is_dir() else [p])
    ]
    for p in sorted({_posix(p) for p in files if not Path(p).is_dir()}):
        rel = Path(p).resolve().relative_to(run_dir.resolve())
        records.append(file_record(p, rel.as_posix()))
    input_records = [{"role": role, **file_record(path, str(path))} for role, path in inputs]
    positions, per_set = _tree_positions(trees_used)
    sets = tree_sets(config)
    tcfg = next(iter(sets.values()))
    trees_record = next(
        r for r in input_records if r["role"] == "trees" or r["role"].startswith("tree_set.")
    )
    return {
        "mkforest_manifest": FORMAT_VERSION,
        "run": config["run"],
        "run_folder": _posix(run_dir),
        "seed": config["seed"],
        "trees": {
            "file": tcfg["file"],
            "sha256": trees_record["sha256"],
            "burnin": tcfg["burnin"],
            "thin": tcfg["thin"],
            "sample": tcfg.get("sample"),
            "root": tcfg.get("root"),
            "rooted": describe_rooting(tcfg.get("root")),
            "n_used": len(positions),
            "positions": positions,
            "positions_are": "0-based positions of the trees used in the tree file, after "
            "burn-in, thinning and sampling (tables/trees_used.tsv)",
        },
        "tree_sets": {
            name: {"file": spec["file"], "n_used": per_set.get(name, 0)}
            for name, spec in sets.items()
        },
        "inputs": input_records,
        "outputs": records,
        "config": config,
        "software": software_versions(),
        "mkforest_source": source_revision(),
        "platform": platform_info(),
        "invocation": invocation,
    }


def _tree_positions(path) -> tuple:
    """(positions of the first tree set's trees, {set name: trees used})."""
    lines = Path(path).read_text().splitlines()
    header = lines[0].split("\t")
    col = header.index("tree")
    rows = [line.split("\t") for line in lines[1:] if line.strip()]
    if "tree_set" not in header:
        return [int(r[col]) for r in rows], {}
    sc = header.index("tree_set")
    counts = {}
    for r in rows:
        counts[r[sc]] = counts.get(r[sc], 0) + 1
    first = rows[0][sc] if rows else ""
    return [int(r[col]) for r in rows if r[sc] == first], counts


def write_json(path, data) -> None:
    """Write JSON through a temporary file, so a half-written file never has the final name."""
    path = Path(path)
    tmp = path.with_name(path.name + ".part")
    tmp.write_text(json.dumps(data, indent=2, ensure_ascii=False) + "\n")
    os.replace(tmp, path)


def load_manifest(path) -> dict:
    path = Path(path)
    try:
        data = json.loads(path.read_text())
    except FileNotFoundError:
        raise InputError(f"'{path}' does not exist.") from None
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"'{path}' is not a readable manifest ({exc}).") from None
    return _check_manifest(data, str(path))


def _check_manifest(data, source: str) -> dict:
    if not isinstance(data, dict) or data.get("mkforest_manifest") != FORMAT_VERSION:
        raise InputError(f"'{source}' is not an mkforest manifest (format {FORMAT_VERSION}).")
    for key in ("run", "outputs", "inputs", "config"):
        if key not in data:
            raise InputError(f"'{source}': the manifest lacks '{key}'; it was edited or truncated.")
    return data


# --------------------------------------------------------------------------- checking


@dataclass
class Check:
    """What a verification found. Paths are as the user sees them."""

    target: str
    kind: str
    checked: int = 0
    changed: list = field(default_factory=list)
    missing: list = field(default_factory=list)
    extra: list = field(default_factory=list)
    notes: list = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not (self.changed or self.missing or self.extra)

    def lines(self) -> list:
        out = [f"{self.target} ({self.kind})"]
        out += [f"  changed  {p}" for p in self.changed]
        out += [f"  missing  {p}" for p in self.missing]
        out += [f"  extra    {p}" for p in self.extra]
        out += [f"  note     {n}" for n in self.notes]
        if self.ok:
            out.append(f"{self.checked} files checked: all match.")
        else:
            bad = [
                f"{len(v)} {k}"
                for k, v in (
                    ("changed", self.changed),
                    ("missing", self.missing),
                    ("extra", self.extra),
                )
                if v
            ]
            out.append(f"{self.checked} files checked: {', '.join(bad)}.")
        return out


def _compare(check: Check, expected: dict, present: dict, label=lambda p: p) -> None:
    """expected {name: sha256}; present {name: sha256} of the files found."""
    for name, sha in sorted(expected.items()):
        check.checked += 1
        if name not in present:
            check.missing.append(label(name))
        elif present[name] != sha:
            check.changed.append(label(name))
    for name in sorted(set(present) - set(expected)):
        check.extra.append(label(name))


def _workdir_of(run_dir: Path, manifest: dict) -> Path:
    depth = len(PurePosixPath(manifest.get("run_folder", "results/x")).parts)
    return run_dir.resolve().parents[depth - 1] if depth else run_dir.resolve()


def verify_run_folder(run_dir, against=None) -> Check:
    """Check a run folder against its manifest.json (or another run's manifest).

    Result files are checked, and every file in a folder that holds a listed
    result is accounted for (working folders such as fits/ or logs/ are not).
    With ``against``, the results are compared with that manifest's (a rerun
    compared with the original run); inputs are then not checked.
    """
    run_dir = Path(run_dir)
    own = load_manifest(run_dir / MANIFEST)
    manifest = load_manifest(against) if against else own
    kind = f"run folder, against {against}" if against else "run folder"
    check = Check(str(run_dir), kind)
    expected = {r["path"]: r["sha256"] for r in manifest["outputs"]}
    folders = {PurePosixPath(p).parent for p in expected}
    present = {}
    for folder in folders:
        base = run_dir / folder
        if not base.is_dir():
            continue
        for f in base.iterdir():
            rel = (PurePosixPath(folder) / f.name).as_posix()
            # hidden files are no results (Snakemake marks a folder output with
            # .snakemake_timestamp; the manifest lists a folder's files without them)
            hidden = f.name.startswith(".")
            if f.is_file() and rel != MANIFEST and not f.name.endswith(".part") and not hidden:
                present[rel] = sha256_file(f)
    _compare(check, expected, present)
    if against:
        check.notes.append("inputs not compared (a rerun reads them from another place)")
        return check
    workdir = _workdir_of(run_dir, own)
    for rec in own["inputs"]:
        path = Path(rec["path"])
        path = path if path.is_absolute() else workdir / path
        check.checked += 1
        label = f"input {rec['role']}: {rec['path']}"
        if not path.is_file():
            check.missing.append(label)
        elif sha256_file(path) != rec["sha256"]:
            check.changed.append(label)
    return check


def parse_sums(text: str, source: str) -> dict:
    """{path: sha256} from 'sha256sum' lines ('<64 hex>  <path>')."""
    out = {}
    for n, line in enumerate(text.splitlines(), 1):
        if not line.strip():
            continue
        sha, sep, name = line.partition("  ")
        if not sep or len(sha) != 64 or any(c not in "0123456789abcdef" for c in sha):
            raise InputError(
                f"{source}, line {n}: not a '<sha256>  <file>' line; the listing was "
                "edited or damaged."
            )
        out[name.removeprefix("*")] = sha
    return out


def _cross_check(check: Check, sums: dict, manifest: dict, run: str, label) -> None:
    """Every result and input the manifest lists must be packed with the same checksum."""
    for rec in manifest["outputs"]:
        name = f"results/{run}/{rec['path']}"
        if name in sums and sums[name] != rec["sha256"]:
            check.changed.append(f"{label(name)} (differs from the manifest)")
    packed = {
        PurePosixPath(n).parts[1] + "/" + PurePosixPath(n).name: sha
        for n, sha in sums.items()
        if n.startswith("inputs/")
    }
    for rec in manifest["inputs"]:
        key = f"{rec['role']}/{Path(rec['path']).name}"
        if key in packed and packed[key] != rec["sha256"]:
            check.changed.append(f"{label('inputs/' + key)} (differs from the manifest)")


def verify_unpacked(folder) -> Check:
    folder = Path(folder)
    check = Check(str(folder), "unpacked archive")
    sums = parse_sums((folder / SUMS).read_text(), str(folder / SUMS))
    present = {}
    for f in sorted(folder.rglob("*")):
        if f.is_file():
            rel = f.relative_to(folder).as_posix()
            if rel != SUMS:
                present[rel] = sha256_file(f)
    _compare(check, sums, present)
    manifests = [n for n in sums if n.startswith("results/") and n.endswith("/" + MANIFEST)]
    if manifests and (folder / manifests[0]).is_file():
        try:
            m = load_manifest(folder / manifests[0])
        except InputError as exc:
            check.notes.append(f"manifest not readable, not compared with the listing: {exc}")
        else:
            _cross_check(check, sums, m, m["run"], lambda n: n)
    return check


def verify_archive(path) -> Check:
    path = Path(path)
    check = Check(str(path), "archive")
    side = path.with_name(path.name + ".sha256")
    if side.is_file():
        listed = parse_sums(side.read_text(), str(side))
        check.checked += 1
        if listed.get(path.name) != sha256_file(path):
            check.changed.append(f"{path.name} (its checksum differs from {side.name})")
    else:
        check.notes.append(
            f"no {side.name} beside the archive: the archive file itself is not "
            "checked, only its contents"
        )
    try:
        tar = tarfile.open(path, "r:gz")
    except (tarfile.TarError, OSError, EOFError) as exc:
        raise InputError(f"'{path}' is not a readable .tar.gz archive ({exc}).") from None
    present, top, odd = {}, None, []
    with tar:
        try:
            members = tar.getmembers()
        except (tarfile.TarError, OSError, EOFError) as exc:
            raise InputError(f"'{path}' is damaged: {exc}.") from None
        for m in members:
            parts = PurePosixPath(m.name).parts
            top = top or parts[0]
            if parts[0] != top or m.name.startswith("/") or ".." in parts:
                odd.append(m.name)
                continue
            rel = PurePosixPath(*parts[1:]).as_posix() if len(parts) > 1 else ""
            if m.isfile():
                h = hashlib.sha256()
                fh = tar.extractfile(m)
                for block in iter(lambda: fh.read(1 << 20), b""):
                    h.update(block)
                present[rel] = h.hexdigest()
            elif not m.isdir():
                odd.append(m.name)
        if SUMS not in present:
            raise InputError(
                f"'{path}' holds no {SUMS} in a top folder: it is not an mkforest archive."
            )
        sums_text = tar.extractfile(f"{top}/{SUMS}").read().decode()
        sums = parse_sums(sums_text, f"{path}:{top}/{SUMS}")
        manifest = None
        for n in sums:
            if n.startswith("results/") and n.endswith("/" + MANIFEST) and n in present:
                raw = tar.extractfile(f"{top}/{n}").read()
                try:
                    manifest = _check_manifest(json.loads(raw), f"{path}:{top}/{n}")
                except (json.JSONDecodeError, UnicodeDecodeError, InputError) as exc:
                    check.notes.append(
                        f"manifest not readable, not compared with the listing: {exc}"
                    )
    del present[SUMS]
    _compare(check, sums, present, lambda n: f"{top}/{n}")
    check.extra += [f"{n} (not a regular file in the archive's folder)" for n in odd]
    if manifest:
        _cross_check(check, sums, manifest, manifest["run"], lambda n: f"{top}/{n}")
    return check


def verify(path, against=None) -> Check:
    """Check an archive (.tar.gz), an unpacked archive, or a run folder."""
    path = Path(path)
    if not path.exists():
        raise InputError(
            f"'{path}' does not exist: give an archive (.tar.gz), an unpacked "
            "archive folder or a run folder (results/<run>)."
        )
    if path.is_file():
        if against:
            raise InputError(
                f"--against compares a run folder with another run's manifest; '{path}' is a file."
            )
        return verify_archive(path)
    if against:
        return verify_run_folder(path, against)
    if (path / SUMS).is_file():
        return verify_unpacked(path)
    if (path / MANIFEST).is_file():
        return verify_run_folder(path)
    raise InputError(
        f"'{path}' holds neither {MANIFEST} (a run folder) nor {SUMS} (an unpacked "
        "mkforest archive). A run folder gets its manifest when the workflow finishes."
    )


# --------------------------------------------------------------------------- the archive


def parse_author(text: str) -> dict:
    """'Family, Given' or 'Given Family' as a CITATION.cff person."""
    text = " ".join(str(text).split())
    if "," in text:
        family, given = (s.strip() for s in text.split(",", 1))
    else:
        given, _, family = text.rpartition(" ")
    if not family or not given:
        raise InputError(f"author '{text}': write it as 'Family, Given' (or 'Given Family').")
    return {"family-names": family, "given-names": given}


def citation_cff(
    manifest: dict, methods: str, authors, title: str | None, date: str, identifiers
) -> str:
    """CITATION.cff (format 1.2.0) for the archive of a run, as YAML text."""
    from .citations import cited_in

    run = manifest["run"]
    traits = manifest["config"]["traits"]["columns"]
    n = manifest["trees"]["n_used"]
    names = traits[0] if len(traits) == 1 else ", ".join(traits[:-1]) + " and " + traits[-1]
    title = title or (
        f"mkforest run '{run}': Markov models of {names} over {n} {'tree' if n == 1 else 'trees'}"
    )
    sw = manifest["software"]
    doc = {
        "cff-version": "1.2.0",
        "message": "If you use these results, please cite them using the metadata from this file.",
        "type": "dataset",
        "title": title,
        "authors": [parse_author(a) for a in authors],
        "date-released": date,
        "abstract": (
            f"Results of the mkforest run '{run}': continuous-time Markov (Mk) models of "
            f"{len(traits)} categorical trait{'s' if len(traits) != 1 else ''} fitted on "
            f"each of {n} trees, with model support, rates, plots, a methods text, the "
            "inputs, the resolved configuration and a manifest of SHA-256 checksums."
        ),
        "keywords": KEYWORDS,
        "identifiers": [
            {"type": "other", "value": f"sha256:{sha}", "description": what}
            for sha, what in identifiers
        ],
        "references": [
            {
                "type": "software",
                "title": "mkforest",
                "authors": [{"name": "The mkforest developers"}],
                "version": sw.get("mkforest", ""),
            },
            {
                "type": "software",
                "title": "Snakemake",
                "authors": [{"name": "The Snakemake developers"}],
                "version": sw.get("snakemake", ""),
            },
        ]
        + [r.cff() for r in cited_in(methods)],
    }
    return yaml.safe_dump(doc, sort_keys=False, allow_unicode=True, width=100)


def _rerun_config(config: dict, packed_inputs: dict) -> str:
    cfg = copy.deepcopy(config)
    for role, keys in input_keys(config):
        if role in packed_inputs:
            node = cfg
            for k in keys[:-1]:
                node = node[k]
            node[keys[-1]] = packed_inputs[role]
    if isinstance(cfg.get("scan"), dict) and "traits" not in cfg["scan"]:
        # no scan was asked for: the block holds only its defaults, and the schema asks
        # a scan block for its traits, so the rerun config leaves it out
        del cfg["scan"]
    head = (
        "# The resolved configuration of this run (defaults filled in), with its input\n"
        "# files read from inputs/. See README.txt to run it again.\n"
    )
    return head + yaml.safe_dump(cfg, sort_keys=False, allow_unicode=True)


def _readme(manifest: dict, top: str) -> str:
    run = manifest["run"]
    inv = manifest.get("invocation", {})
    return f"""mkforest run '{run}'
Finished {inv.get("finished", "?")} with mkforest {manifest["software"].get("mkforest", "?")}.

results/{run}/methods.md      methods and results text, written from this run's tables
results/{run}/manifest.json   settings, software versions, trees used, SHA-256 of every file
results/{run}/tables/         tables (tab-separated); results/{run}/plots/: figures
inputs/                       the trees, the trait table and the config file(s) as given
config.yaml                   the resolved config, reading its inputs from inputs/
CITATION.cff                  how to cite these results
SHA256SUMS                    checksum of every other file here

Check that nothing changed:
  mkforest verify .            (or: sha256sum -c SHA256SUMS)

Run it again from here (mkforest installed; /path/to/mkforest is its repository):
  snakemake --snakefile /path/to/mkforest/Snakefile --configfile config.yaml \\
      --config run={run}-rerun --cores 2
  mkforest verify results/{run}-rerun --against results/{run}/manifest.json

The second command compares every result of the rerun with this run's checksums.
"""


def _tarinfo(name: str, size: int, mtime: float) -> tarfile.TarInfo:
    info = tarfile.TarInfo(name)
    info.size = size
    info.mtime = int(mtime)
    info.mode = 0o644
    return info


def archive_run(run_dir, out_dir=None, authors=(), title=None, date=None) -> dict:
    """Pack a finished run folder with its inputs, config and manifest (see module docstring).

    Refuses (InputError) when a result or input no longer matches the manifest,
    so an archive always holds what the run produced.
    """
    run_dir = Path(run_dir)
    if not (run_dir / MANIFEST).is_file():
        raise InputError(
            f"'{run_dir}' has no {MANIFEST}: give a finished run folder "
            "(results/<run>); the workflow writes the manifest last."
        )
    if not authors:
        raise InputError(
            "name at least one author for CITATION.cff with --author "
            "'Family, Given' (repeat it for several authors)."
        )
    for a in authors:
        parse_author(a)  # a badly written name stops here, before any work
    check = verify_run_folder(run_dir)
    if check.changed or check.missing:
        first = (check.changed + check.missing)[0]
        raise InputError(
            f"cannot archive '{run_dir}': {len(check.changed)} file(s) changed and "
            f"{len(check.missing)} missing since the run (first: {first}). Run the "
            "workflow again so the manifest describes the results, then archive."
        )
    manifest = load_manifest(run_dir / MANIFEST)
    run = manifest["run"]
    top = f"{run}-archive"
    out_dir = Path(out_dir) if out_dir else _workdir_of(run_dir, manifest) / "archives" / run
    out_dir.mkdir(parents=True, exist_ok=True)
    date = date or datetime.now(timezone.utc).date().isoformat()

    files = [(f"results/{run}/{r['path']}", run_dir / r["path"]) for r in manifest["outputs"]]
    files.append((f"results/{run}/{MANIFEST}", run_dir / MANIFEST))
    workdir = _workdir_of(run_dir, manifest)
    packed_inputs, used_names = {}, set()
    for rec in manifest["inputs"]:
        src = Path(rec["path"])
        src = src if src.is_absolute() else workdir / src
        name = f"inputs/{rec['role']}/{src.name}"
        i = 2
        while name in used_names:
            name = f"inputs/{rec['role']}/{i}_{src.name}"
            i += 1
        used_names.add(name)
        files.append((name, src))
        packed_inputs.setdefault(rec["role"], name)

    methods_path = run_dir / "methods.md"
    methods = methods_path.read_text() if methods_path.is_file() else ""
    manifest_sha = sha256_file(run_dir / MANIFEST)
    manifest_id = (
        manifest_sha,
        f"SHA-256 of results/{run}/{MANIFEST}, which lists the "
        "checksum of every input and result file of the run",
    )
    generated = {
        "config.yaml": _rerun_config(manifest["config"], packed_inputs).encode(),
        "README.txt": _readme(manifest, top).encode(),
        "CITATION.cff": citation_cff(
            manifest, methods, authors, title, date, [manifest_id]
        ).encode(),
    }
    sums = {name: sha256_file(src) for name, src in files}
    sums.update({name: sha256_bytes(data) for name, data in generated.items()})
    generated[SUMS] = "".join(f"{sha}  {name}\n" for name, sha in sorted(sums.items())).encode()

    archive = out_dir / f"{top}.tar.gz"
    part = archive.with_name(archive.name + ".part")
    stamp = datetime.now(timezone.utc).timestamp()
    with tarfile.open(part, "w:gz") as tar:
        for name, src in sorted(files):
            info = tar.gettarinfo(str(src), arcname=f"{top}/{name}")
            info.uid = info.gid = 0
            info.uname = info.gname = ""
            info.mode = 0o644
            with open(src, "rb") as fh:
                tar.addfile(info, fh)
        for name, data in generated.items():
            tar.addfile(_tarinfo(f"{top}/{name}", len(data), stamp), io.BytesIO(data))
    os.replace(part, archive)
    archive_sha = sha256_file(archive)
    sha_path = archive.with_name(archive.name + ".sha256")
    sha_path.write_text(f"{archive_sha}  {archive.name}\n")
    cff_path = out_dir / "CITATION.cff"
    cff_path.write_text(
        citation_cff(
            manifest,
            methods,
            authors,
            title,
            date,
            [(archive_sha, f"SHA-256 of {archive.name}"), manifest_id],
        )
    )
    return {
        "archive": archive,
        "sha256": archive_sha,
        "sha256_file": sha_path,
        "citation": cff_path,
        "n_files": len(files) + len(generated),
        "not_packed": check.extra,
    }
