"""Trait tables: states coded by their labels, with missing and ambiguous values.

A tip's data is the set of states it may be in: one state when observed, several
when ambiguous or polymorphic (``red|blue``), all of them when missing.
"""

from __future__ import annotations

import csv
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import InputError, did_you_mean

DEFAULT_MISSING = ("?", "NA", "-", "")


@dataclass(eq=False)
class Trait:
    """One categorical trait.

    possible  bool [n_taxa, k]: True where the taxon may be in that state
              (a row of all True is missing data).
    column    the table's header as written (``Leaf shape``) when the trait is analysed
              under another, file-safe name (``Leaf_shape``); "" when they are the same.
    """

    name: str
    states: tuple
    taxa: tuple
    possible: np.ndarray
    column: str = ""

    @property
    def written(self) -> str:
        """The trait's name as written in the table's header."""
        return self.column or self.name

    @property
    def k(self) -> int:
        return len(self.states)

    def observed_mask(self) -> np.ndarray:
        """Taxa with data: at least one state excluded."""
        return ~self.possible.all(axis=1)

    @property
    def n_observed(self) -> int:
        return int(self.observed_mask().sum())

    def state_counts(self) -> dict:
        """Taxa known to be in exactly one state, per state label."""
        single = self.possible.sum(axis=1) == 1
        return {s: int((self.possible[:, i] & single).sum()) for i, s in enumerate(self.states)}

    def n_ambiguous(self) -> int:
        n = self.possible.sum(axis=1)
        return int(((n > 1) & (n < self.k)).sum())

    def observed_states(self) -> list:
        """States that at least one taxon is known to be in."""
        counts = self.state_counts()
        return [s for s in self.states if counts[s] > 0]

    def tip_partials(self, tree, absent: str = "error") -> np.ndarray:
        """float64 [tree.n_tips, k]: 1.0 where the tip may be in the state, in tree tip order.

        absent: what to do with a tree tip missing from the table: "error", or
        "missing" to treat it as unknown.
        """
        row = {t: i for i, t in enumerate(self.taxa)}
        out = np.ones((tree.n_tips, self.k))
        lacking = []
        for v, label in enumerate(tree.tip_labels):
            i = row.get(label)
            if i is None:
                lacking.append(label)
                continue
            out[v] = self.possible[i]
        if lacking and absent == "error":
            shown = ", ".join(f"'{x}'" for x in lacking[:5])
            more = f" and {len(lacking) - 5} more" if len(lacking) > 5 else ""
            raise InputError(
                f"trait '{self.name}': taxon {shown}{more} is in tree {tree.index} but not in "
                "the trait table. Add a row with '?' for unknown values, or remove the taxon from "
                "the trees."
            )
        return out


# Characters spreadsheets and other programs write between the states of a polymorphic cell.
SEPARATOR_LOOKALIKES = ("/", ",", ";", "&", "|", "+")


def combined_states(states, separator: str = "|") -> dict:
    """{separator: [labels]}: state labels that are two or more other labels joined by one
    of SEPARATOR_LOOKALIKES (``0/1`` beside ``0`` and ``1``), i.e. polymorphic cells read as
    states of their own because traits.separator is another character."""
    plain = set(states)
    out: dict = {}
    for s in states:
        for sep in SEPARATOR_LOOKALIKES:
            if sep == separator or sep not in s:
                continue
            parts = [p.strip() for p in s.split(sep)]
            if len(parts) > 1 and all(p in plain for p in parts):
                out.setdefault(sep, []).append(s)
                break
    return out


def _split(value: str, separator: str) -> list:
    return [p.strip() for p in value.split(separator)] if separator else [value]


def code_trait(
    name: str,
    values: dict,
    states=None,
    missing=DEFAULT_MISSING,
    separator="|",
    source: str = "",
    rows: dict | None = None,
) -> Trait:
    """Code a mapping taxon -> cell text.

    states: the state labels in the user's order; None sorts the observed labels.
    rows: optional taxon -> line number, for error messages.
    """
    missing = set(missing)
    where = f"{source}: " if source else ""
    cells = {}
    seen = set()
    for taxon, raw in values.items():
        text = "" if raw is None else str(raw).strip()
        if text in missing:
            cells[taxon] = None
            continue
        parts = _split(text, separator)
        if any(p in missing for p in parts):
            at = f" (line {rows[taxon]})" if rows and taxon in rows else ""
            raise InputError(
                f"{where}trait '{name}', taxon '{taxon}'{at}: value '{text}' mixes a "
                "missing code with states; write only the possible states, or only the missing code."
            )
        cells[taxon] = parts
        seen.update(parts)
    if states is None:
        states = sorted(seen)
        _check_case(name, cells, states, where, rows)
    else:
        states = [str(s) for s in states]
        if len(set(states)) != len(states):
            raise InputError(
                f"{where}trait '{name}': the state order lists a state twice: {states}"
            )
        unknown = sorted(seen - set(states))
        if unknown:
            taxon = next(t for t, p in cells.items() if p and set(p) & set(unknown))
            at = f" (line {rows[taxon]})" if rows and taxon in rows else ""
            raise InputError(
                f"{where}trait '{name}', taxon '{taxon}'{at}: state '{unknown[0]}' is not in the "
                f"state order given for this trait ({', '.join(states)}). Add it to the order or "
                f"fix the cell.{did_you_mean(unknown[0], states)}"
            )
    index = {s: i for i, s in enumerate(states)}
    taxa = tuple(values)
    possible = np.zeros((len(taxa), len(states)), dtype=bool)
    for r, taxon in enumerate(taxa):
        parts = cells[taxon]
        if parts is None:
            possible[r] = True
        else:
            possible[r, [index[p] for p in parts]] = True
    return Trait(name, tuple(states), taxa, possible)


def _check_case(name, cells, states, where, rows) -> None:
    """Two labels that differ only in case or inner spacing ('Red', 'red') are almost always one
    state typed two ways; stop rather than fit a spurious extra state."""
    by_key = {}
    for s in states:
        key = " ".join(s.lower().split())
        if key in by_key:
            first, second = by_key[key], s
            shown = []
            for label in (first, second):
                taxon = next(t for t, p in cells.items() if p and label in p)
                at = f", line {rows[taxon]}" if rows and taxon in rows else ""
                shown.append(f"'{label}' (taxon '{taxon}'{at})")
            raise InputError(
                f"{where}trait '{name}': states {shown[0]} and {shown[1]} differ only in case or "
                "spacing. Write them the same way, or list both in traits.order."
                f"{name} if they are different states."
            )
        by_key[key] = s


def trait_from_mapping(
    name: str, values: dict, states=None, missing=DEFAULT_MISSING, separator="|"
) -> Trait:
    """Convenience for tests and notebooks: ``{"taxon": "red|blue", ...}``."""
    return code_trait(name, values, states, missing, separator)


def safe_column_name(name: str) -> str:
    """The name a column is analysed under: every run of characters other than letters,
    digits, '_', '-' and '.' replaced by one '_' (``Leaf shape (2021)`` -> ``Leaf_shape_2021``),
    so it can name files; the column keeps its own name in the table."""
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", name.strip()).strip("_") or "column"


def column_of(name: str, header: list) -> str:
    """The table column a trait name in the config reads: the column of that name, else the
    one column whose safe name it is (``Leaf_shape`` reads ``Leaf shape``), else ``name``."""
    if name in header:
        return name
    same = [h for h in header if safe_column_name(h) == name]
    return same[0] if len(same) == 1 else name


def table_header(path) -> list:
    """The column names of a CSV or TSV table's first line; [] when it cannot be read."""
    try:
        with open(path, newline="", encoding="utf-8-sig") as fh:
            line = fh.readline()
    except (OSError, UnicodeDecodeError):
        return []
    delimiter = "\t" if line.count("\t") >= max(1, line.count(",")) else ","
    return [h.strip() for h in next(csv.reader([line], delimiter=delimiter), [])]


def read_traits(
    path,
    taxon_column: str,
    columns=None,
    missing=DEFAULT_MISSING,
    separator="|",
    state_order: dict | None = None,
) -> dict:
    """Read a CSV or TSV trait table (the delimiter is detected from the header line).

    Returns {trait name: Trait} for ``columns`` (all columns but the taxon column when None).
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(f"trait table '{path}' does not exist.")
    with open(path, newline="", encoding="utf-8-sig") as fh:
        header_line = fh.readline()
        if not header_line.strip():
            raise InputError(f"trait table '{path}' is empty; line 1 must name the columns.")
        delimiter = "\t" if header_line.count("\t") >= max(1, header_line.count(",")) else ","
        fh.seek(0)
        reader = csv.reader(fh, delimiter=delimiter)
        header = [h.strip() for h in next(reader)]
        if taxon_column not in header:
            raise InputError(
                f"trait table '{path}', line 1: no column '{taxon_column}' (the taxon "
                f"column named in the config); columns are: {', '.join(header)}."
                f"{did_you_mean(taxon_column, header)}"
            )
        if columns is None:
            columns = [h for h in header if h != taxon_column]
        source_of = {c: column_of(c, header) for c in columns}
        for c in columns:
            if source_of[c] not in header:
                raise InputError(
                    f"trait table '{path}', line 1: no column '{c}' (a trait named in "
                    f"the config); columns are: {', '.join(header)}."
                    f"{did_you_mean(c, header)}"
                )
        ti = header.index(taxon_column)
        table = {c: {} for c in columns}
        rows = {}
        for lineno, row in enumerate(reader, start=2):
            if not row or all(not x.strip() for x in row):
                continue
            if len(row) != len(header):
                raise InputError(
                    f"trait table '{path}', line {lineno}: {len(row)} fields where the "
                    f"header has {len(header)}."
                )
            taxon = row[ti].strip()
            if not taxon:
                raise InputError(f"trait table '{path}', line {lineno}: the taxon cell is empty.")
            if taxon in rows:
                raise InputError(
                    f"trait table '{path}', line {lineno}: taxon '{taxon}' already "
                    f"appears on line {rows[taxon]}; each taxon needs one row."
                )
            rows[taxon] = lineno
            for c in columns:
                table[c][taxon] = row[header.index(source_of[c])]
    if not rows:
        raise InputError(f"trait table '{path}' has a header but no rows.")
    state_order = state_order or {}
    out = {}
    for c in columns:
        out[c] = code_trait(
            c, table[c], state_order.get(c), missing, separator, f"trait table '{path}'", rows
        )
        out[c].column = source_of[c] if source_of[c] != c else ""
    return out


def check_variable(trait: Trait) -> None:
    """Raise InputError when a trait has fewer than two observed states (nothing to fit)."""
    obs = trait.observed_states()
    if len(obs) < 2:
        which = f"only state '{obs[0]}'" if obs else "no observed state"
        raise InputError(
            f"trait '{trait.name}' has {which} among its taxa; a model of change needs "
            "at least two observed states. Drop it from traits.columns."
        )


def traits_to_json(traits: dict) -> dict:
    """Plain data for prepared/traits.json."""
    return {
        name: {
            "states": list(t.states),
            "taxa": list(t.taxa),
            "possible": t.possible.astype(int).tolist(),
            "column": t.written,
        }
        for name, t in traits.items()
    }


def traits_from_json(data: dict) -> dict:
    return {
        name: Trait(
            name,
            tuple(d["states"]),
            tuple(d["taxa"]),
            np.array(d["possible"], dtype=bool).reshape(len(d["taxa"]), len(d["states"])),
            "" if d.get("column", name) == name else d["column"],
        )
        for name, d in data.items()
    }


# ------------------------------------------------------------------ names as written
# A trait is analysed, and its files named, under its config name (``Leaf_shape``); every
# table and figure also shows the header as written in the trait table (``Leaf shape``).

NAME_COLUMNS = ("analysis", "trait", "trait_1", "trait_2")  # columns holding trait names


def written_names(path) -> dict:
    """{analysed name: header as written} for every trait of a prepared/traits.json (the
    two are equal for a column whose header was already file-safe)."""
    import json

    data = json.loads(Path(path).read_text())
    return {name: d.get("column", name) for name, d in data.items()}


def with_written_names(frame, names: dict):
    """The table with, right after each trait-name column it has (NAME_COLUMNS), a column
    ``<column>_as_written`` holding the header as written (a pair's name, ``(trees)`` and
    any other value that names no trait are kept as they are). The one way every results
    table gets these columns."""
    out = frame.copy()
    for col in NAME_COLUMNS:
        if col in out.columns and f"{col}_as_written" not in out.columns:
            at = list(out.columns).index(col) + 1
            given = out[col]
            written = given.map(names)  # a hash look-up per row; no match: NaN
            out.insert(at, f"{col}_as_written", written.where(written.notna(), given))
    return out


def written_text(text: str, names: dict) -> str:
    """``text`` with every whole-word use of a renamed trait's analysed name replaced by
    its header as written. A name inside a path or file name (``/Leaf_shape.png``) or a
    config key (``traits.order.Leaf_shape``) is kept: those hold the analysed name. So is a
    name without '_' (``wet`` for ``wet?``): it differs from the header only by the
    characters stripped at its ends, and as a plain word it may also be a state label."""
    changed = {a: w for a, w in names.items() if a != w and "_" in a}
    if not changed or not text:
        return text
    edge = r"A-Za-z0-9_./\\-"
    pattern = re.compile(
        rf"(?<![{edge}])("
        + "|".join(re.escape(a) for a in sorted(changed, key=len, reverse=True))
        + r")(?![A-Za-z0-9_/\\-]|\.[A-Za-z0-9])"
    )
    return pattern.sub(lambda m: changed[m.group(1)], text)
