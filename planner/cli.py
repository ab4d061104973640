"""The ``axisledger`` command line (DESIGN.md, "Command line contract").

Exit codes: 0 done; 1 ``verify`` found a mismatch; 2 usage or input error (one ``error:``
line on stderr, nothing written); 3 internal bug (a short message and where the traceback
was saved). The command line parses and prints; it computes no statistics.
"""
from __future__ import annotations

import argparse
import os
import sys
import tempfile
import traceback
from datetime import datetime, timezone
from pathlib import Path

from . import __version__
from .errors import InputError, VerificationFailed

DEFAULT_OUT = "axisledger-out"


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage errors as InputError (exit 2, one line)."""

    def error(self, message):  # noqa: D401 - argparse API
        raise InputError(f"{message} ({self.prog})", f"see: {self.prog} --help")


def _components(value: str):
    if value == "auto":
        return "auto"
    try:
        number = int(value)
    except ValueError:
        raise argparse.ArgumentTypeError(f"--components takes 'auto' or a whole number, not {value!r}")
    if number < 1:
        raise argparse.ArgumentTypeError(f"--components must be at least 1, not {number}")
    return number


def _seed(value: str) -> int:
    try:
        number = int(value)
    except ValueError:
        raise argparse.ArgumentTypeError(f"--seed takes a whole number, not {value!r}")
    if number < 0:
        raise argparse.ArgumentTypeError(f"--seed must be >= 0, not {number}")
    return number


def _add_audit_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--out", default=None, help=f"folder for record.json and record.pdf (default ./{DEFAULT_OUT})")
    p.add_argument("--force", action="store_true", help="replace a record already in the --out folder")
    p.add_argument("--title", default=None, help="title of the record")
    p.add_argument("--analyst", default=None, help="name of the person running the audit")
    p.add_argument("--columns", default=None, help="comma-separated feature columns to use (default: all numeric)")
    p.add_argument("--exclude", default=None, help="comma-separated columns to leave out")
    p.add_argument("--id-column", default=None, help="column that names the rows")
    p.add_argument("--target", default=None, help="outcome column for the target check; never reduced")
    p.add_argument("--scaling", default="auto", choices=["auto", "standardize", "center", "robust", "pareto"])
    p.add_argument("--components", default="auto", type=_components, help="'auto' or a number N (needs --because)")
    p.add_argument("--because", default=None, help="reason for overriding a recommendation (--components N, or --plan against it)")
    p.add_argument("--plan", default=None, choices=["components", "feature_subset", "vif_pruning"],
                   help="the reduction taken (default components): the components, a subset of original features, "
                        "or the features left by VIF pruning; --because is needed against the recommended plan")
    p.add_argument("--missing", default="listwise", choices=["listwise", "mean", "fail"])
    p.add_argument("--rules", default=None, help="a rulebook TOML file replacing the default one")
    p.add_argument("--seed", default=0, type=_seed, help="seed for every random step (default 0)")
    p.add_argument("--sheet", default=None, help="sheet of an .xlsx workbook (default: the first)")
    p.add_argument("--parallel-null", default="wishart", choices=["wishart", "permutation"],
                   help="null of parallel analysis: Wishart draws (default) or permuted columns")
    p.add_argument("--no-pdf", action="store_true", help="write record.json only")
    p.add_argument("--engine", default="auto", choices=["auto", "memory", "stream", "dask"],
                   help="memory, stream (chunks, for files larger than memory), dask (a folder or glob of parts); "
                        "auto streams CSV/Parquet files that would take over a quarter of the free memory")
    p.add_argument("--scheduler", default=None, help="with --engine dask: the address of an existing cluster")
    p.add_argument("--quiet", action="store_true", help="no progress bar")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="axisledger", description="Check a table before a PCA reduction, decide it with evidence, and record the decision.")
    parser.add_argument("--version", action="version", version=f"axisledger {__version__}")
    sub = parser.add_subparsers(dest="command", parser_class=_Parser, metavar="COMMAND")
    sub.required = True

    demo = sub.add_parser("demo", help="run the full audit on the invented kiln-line data")
    demo.add_argument("--out", default=DEFAULT_OUT, help=f"output folder (default ./{DEFAULT_OUT})")
    demo.add_argument("--no-pdf", action="store_true", help="write record.json only")

    audit = sub.add_parser("audit", help="audit a CSV, Parquet or .xlsx file")
    audit.add_argument("data", help="the data file")
    _add_audit_options(audit)

    sign = sub.add_parser("sign", help="add a sign-off to a record (optionally with an Ed25519 key)")
    sign.add_argument("record", help="the record.json")
    sign.add_argument("--name", required=True, help="the signer's printed name")
    sign.add_argument("--role", required=True, choices=["author", "reviewer", "approver"])
    sign.add_argument("--meaning", required=True, help="what the signature means, e.g. 'reviewed the method'")
    sign.add_argument("--key", default=None, help="an Ed25519 private key in PEM (openssl genpkey -algorithm ed25519)")

    verify = sub.add_parser("verify", help="check a record's content hash, sign-off chain and signatures")
    verify.add_argument("record", help="record.json or record.pdf")
    verify.add_argument("--data", default=None, help="the data file: check its SHA-256 against the record")

    apply = sub.add_parser("apply", help="reduce new rows with a record's plan")
    apply.add_argument("record", help="record.json or record.pdf")
    apply.add_argument("data", help="the data file with the plan's feature columns")
    apply.add_argument("--out", required=True, help="the CSV to write (PC1..PCk, spe, t2, beyond_limit)")
    apply.add_argument("--allow-draft", action="store_true", help="apply a record that nobody has signed yet")
    apply.add_argument("--force", action="store_true", help="replace an existing --out file")

    rules = sub.add_parser("rules", help="print the rulebook in force, with sources")
    rules.add_argument("--rules", default=None, help="a rulebook TOML file (default: the built-in one)")
    return parser


def _command_line(argv: list[str]) -> list[str]:
    return ["axisledger", *argv]


def cmd_audit(args, argv: list[str]) -> int:
    from .pipeline import AuditOptions, run_audit
    from .output import check_out_dir, write_audit
    from .render.summary import render_summary

    out_dir = Path(args.out or DEFAULT_OUT)
    check_out_dir(out_dir, args.force)
    options = AuditOptions(
        title=args.title if args.title is not None else f"PCA decision record for {Path(args.data).name}",
        analyst=args.analyst,
        columns=args.columns,
        exclude=args.exclude,
        id_column=args.id_column,
        target=args.target,
        scaling=args.scaling,
        components=args.components,
        because=args.because,
        plan=args.plan,
        missing=args.missing,
        rules=args.rules,
        seed=args.seed,
        sheet=args.sheet,
        parallel_null=args.parallel_null,
        engine=args.engine,
        scheduler=args.scheduler,
        quiet=args.quiet,
        command_line=_command_line(argv),
    )
    result = run_audit(args.data, options)
    paths = write_audit(result.record, out_dir, pdf=not args.no_pdf, force=args.force)
    print(render_summary(result.record, paths))
    return 0


def cmd_demo(args, argv: list[str]) -> int:
    from .demo import run_demo

    paths, record = run_demo(Path(args.out), pdf=not args.no_pdf, command_line=_command_line(argv))
    from .render.summary import render_summary

    print(render_summary(record, paths))
    return 0


def cmd_rules(args, argv: list[str]) -> int:
    from .rulebook import format_rulebook, load_rulebook

    print(format_rulebook(load_rulebook(args.rules)))
    return 0


def cmd_sign(args, argv: list[str]) -> int:
    from .ledger import sign_file

    record = sign_file(args.record, args.name, args.role, args.meaning, args.key)
    entry = record["signoffs"][-1]
    keyed = f", Ed25519 key {entry['key_fingerprint'][:16]}" if "signature" in entry else ""
    print(f"signed {record['record_id']} as {entry['role']} ({entry['name']}{keyed}); status {record['status']}; "
          f"{len(record['signoffs'])} sign-off(s) on the chain")
    print(f"  record    {args.record}")
    print(f"  pdf       {Path(args.record).with_suffix('.pdf')}")
    return 0


def cmd_verify(args, argv: list[str]) -> int:
    from .ledger import verify_file

    checked = verify_file(args.record, args.data)
    print(f"verified {args.record}")
    for line in checked:
        print(f"  ok  {line}")
    return 0


def cmd_apply(args, argv: list[str]) -> int:
    from .ledger import apply_file

    summary = apply_file(args.record, args.data, args.out, allow_draft=args.allow_draft, force=args.force)
    what = (f"{summary['components']} component(s)" if summary["plan"] == "components"
            else f"plan {summary['plan']}: {summary['components']} original feature(s)")
    print(f"wrote {summary['out']}: {summary['rows']} row(s), {what}, {summary['beyond_limit']} beyond a 95% limit")
    if summary["spe_not_computed"]:
        print("  spe and beyond_limit are empty: the SPE needs every feature column of the record, not only the kept ones")
    if summary["incomplete_rows"]:
        print(f"  {summary['incomplete_rows']} row(s) have a missing feature value: their scores are empty")
    if summary["extra_columns"]:
        shown = ", ".join(summary["extra_columns"][:8])
        print(f"  not in the plan, left out: {shown}{' ...' if len(summary['extra_columns']) > 8 else ''}")
    return 0


COMMANDS = {"audit": cmd_audit, "demo": cmd_demo, "rules": cmd_rules, "sign": cmd_sign, "verify": cmd_verify, "apply": cmd_apply}


def _save_traceback() -> str:
    stamp = datetime.now(timezone.utc).strftime("%Y%m%dT%H%M%SZ")
    fd, path = tempfile.mkstemp(prefix=f"axisledger-crash-{stamp}-", suffix=".txt")
    with os.fdopen(fd, "w", encoding="utf-8") as handle:
        handle.write(f"axisledger {__version__} internal error\nargv: {sys.argv!r}\n\n")
        handle.write(traceback.format_exc())
    return path


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    try:
        args = build_parser().parse_args(argv)
        return COMMANDS[args.command](args, argv)
    except InputError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except VerificationFailed as exc:
        print(f"verify: {exc}", file=sys.stderr)
        return 1
    except SystemExit as exc:  # --help and --version
        return int(exc.code or 0) if isinstance(exc.code, int) else 0
    except BrokenPipeError:  # the reader of our output went away (e.g. | head)
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 0
    except KeyboardInterrupt:
        print("error: interrupted; no file was changed", file=sys.stderr)
        return 2
    except BaseException:  # noqa: BLE001 - the contract: exit 3 with the traceback saved
        path = _save_traceback()
        print(f"internal error: this is a bug in axisledger; the traceback was saved to {path}", file=sys.stderr)
        return 3


if __name__ == "__main__":
    raise SystemExit(main())
