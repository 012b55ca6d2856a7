"""The mkforest command: write a starting config, pack a finished run into a
citable archive, and check one.

  mkforest init --trees FILE --traits FILE [--taxon-column NAME] [--output PATH] [--force]
  mkforest archive results/<run> --author "Family, Given" [--author ...] [--title T] [--output DIR]
  mkforest verify <archive.tar.gz | unpacked archive | results/<run>> [--against manifest.json]

Exit status: 0 when all is well, 1 when verify finds a changed, missing or
extra file, 2 for a usage or input mistake (one sentence on stderr).
"""

from __future__ import annotations

import argparse
import sys

from .errors import InputError


class _Parser(argparse.ArgumentParser):
    def error(self, message):
        self.print_usage(sys.stderr)
        print(f"mkforest: error: {message}", file=sys.stderr)
        raise SystemExit(2)


def _parser() -> argparse.ArgumentParser:
    p = _Parser(
        prog="mkforest",
        description="Write a starting config, archive and verify "
        "mkforest runs. The analysis itself runs as a Snakemake workflow: "
        "make run CONFIG=my_config.yaml",
    )
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)
    i = sub.add_parser(
        "init",
        help="write a commented starting config for your trees and traits",
        description="Read your tree file and trait table, describe them, and write "
        "a commented config that runs as written; print the command to run it.",
    )
    i.add_argument("--trees", required=True, metavar="FILE", help="Newick or NEXUS tree file")
    i.add_argument("--traits", required=True, metavar="FILE", help="CSV or TSV trait table")
    i.add_argument(
        "--taxon-column",
        metavar="NAME",
        help="the table's taxon column (default: 'taxon', else the column whose "
        "values match the most tree tips)",
    )
    i.add_argument(
        "--output",
        default="my_config.yaml",
        metavar="PATH",
        help="config file to write (default: my_config.yaml); its name is the run's",
    )
    i.add_argument("--force", action="store_true", help="replace the output file if it exists")
    a = sub.add_parser(
        "archive",
        help="pack a finished run with its inputs, config and manifest",
        description="Pack results/<run> with its inputs, config and manifest into "
        "<run>-archive.tar.gz, and write its SHA-256 and a CITATION.cff beside it.",
    )
    a.add_argument("run_folder", help="a finished run folder, results/<run>")
    a.add_argument(
        "--author",
        action="append",
        default=[],
        metavar="NAME",
        help="an author for CITATION.cff, 'Family, Given' (repeat for several)",
    )
    a.add_argument("--title", help="title for CITATION.cff (default: made from the run)")
    a.add_argument(
        "--output",
        metavar="DIR",
        help="folder for the archive, its .sha256 and CITATION.cff "
        "(default: archives/<run> beside results/)",
    )
    v = sub.add_parser(
        "verify",
        help="recheck every checksum of an archive or run folder",
        description="Recheck every checksum of an archive (.tar.gz), an unpacked "
        "archive or a run folder, and name each changed, missing or extra file.",
    )
    v.add_argument("path", help="archive .tar.gz, unpacked archive folder, or results/<run>")
    v.add_argument(
        "--against",
        metavar="MANIFEST",
        help="compare the run folder's results with another run's manifest.json "
        "(a rerun with the original)",
    )
    return p


def _init(args) -> int:
    from .starter import write_starter

    starter, command = write_starter(
        args.trees, args.traits, args.taxon_column, args.output, args.force
    )
    print("\n".join(starter.summary))
    print(f"wrote   {args.output} (run: {starter.run}); read its comments, then run:")
    print(command)
    return 0


def _archive(args) -> int:
    from .report.provenance import archive_run

    out = archive_run(args.run_folder, args.output, args.author, args.title)
    size = out["archive"].stat().st_size
    print(f"archive   {out['archive']}  ({out['n_files']} files, {size / 1e6:.2f} MB)")
    print(f"sha256    {out['sha256']}  ({out['sha256_file']})")
    print(f"citation  {out['citation']}")
    for p in out["not_packed"]:
        print(f"not packed (not a result of the run): {p}")
    print(f"check it: mkforest verify {out['archive']}")
    return 0


def _verify(args) -> int:
    from .report.provenance import verify

    check = verify(args.path, args.against)
    print("\n".join(check.lines()))
    return 0 if check.ok else 1


def main(argv=None) -> int:
    args = _parser().parse_args(argv)
    try:
        return {"init": _init, "archive": _archive, "verify": _verify}[args.command](args)
    except InputError as exc:
        print(f"mkforest: error: {exc}", file=sys.stderr)
        return 2
    except OSError as exc:
        where = f" '{exc.filename}'" if exc.filename else ""
        print(
            f"mkforest: error: cannot read or write{where}: {exc.strerror or exc}.", file=sys.stderr
        )
        return 2


if __name__ == "__main__":
    sys.exit(main())
