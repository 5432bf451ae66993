"""The `baggr` command: its options (argparse), and main, which turns every error into one line.

The commands themselves are in baggr.cli.commands; starting and following a job in baggr.cli.launch.
"""
from __future__ import annotations

import argparse
import re
import sys
import textwrap
import traceback

from baggr.cli.commands import (cmd_compare, cmd_demo, cmd_job, cmd_predict, cmd_report, cmd_resume, cmd_stop,
                                cmd_train, cmd_watch)
from baggr.config import MEASURES
from baggr.errors import BaggrError

COMMANDS = ("train", "compare", "resume", "watch", "stop", "report", "predict", "demo")


# ---------------------------------------------------------------- parsing

class Parser(argparse.ArgumentParser):
    """argparse that reports a usage mistake in one line (exit 2), like every other user error."""

    def error(self, message):
        message = message.replace(", '_job'", "")  # the detached job's own entry is not for people
        sys.stderr.write(f"baggr: error: {message} (see: {self.prog} --help)\n")
        sys.exit(2)


def _features_per_split(text: str):
    if text in ("sqrt", "log2"):
        return text
    try:
        return int(text)
    except ValueError:
        pass
    try:
        return float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected sqrt, log2, a whole number or a fraction, got {text!r}") from None


def _delimiter(text: str) -> str:
    named = {"tab": "\t", "\\t": "\t", "comma": ",", "semicolon": ";", "space": " ", "bar": "|", "pipe": "|"}
    d = named.get(text.lower(), text)
    if len(d) != 1 or d in "\"\r\n":
        raise argparse.ArgumentTypeError(f"expected one character (or tab), got {text!r}")
    return d


def _columns(text: str) -> list[str]:
    names = [n for n in text.split(",") if n != ""]
    if not names:
        raise argparse.ArgumentTypeError(f"expected column names separated by commas, got {text!r}")
    return names


def _joined(values) -> list[str]:
    """The names of a repeatable COL,... option, in order, each once."""
    return list(dict.fromkeys(n for group in values or () for n in group))


def table_parser() -> "Parser":
    """Options that choose how a training table is read: --drop, --only, --delimiter, --missing-target
    (a parent parser, for every command that trains)."""
    tp = Parser(add_help=False)
    g = tp.add_argument_group("table")
    g.add_argument("--drop", type=_columns, action="append", metavar="COL,...",
                   help="leave these columns out (identifiers, free text, leaks of the target)")
    g.add_argument("--only", type=_columns, action="append", metavar="COL,...",
                   help="use only these columns as features (the target is always read)")
    g.add_argument("--delimiter", type=_delimiter, default=None, metavar="CHAR",
                   help="field delimiter of a text table: a character or tab (default: from the suffix)")
    g.add_argument("--missing-target", choices=("drop", "refuse"), default="drop",
                   help="rows whose target is missing: leave them out with a warning (drop, the default) "
                        "or stop with an error (refuse)")
    return tp


def table_options(args) -> dict:
    """The table options of parsed args, as a run's config.json keeps them (baggr.runs.TABLE_OPTIONS)."""
    return {"drop": _joined(args.drop), "only": _joined(args.only), "delimiter": args.delimiter,
            "missing_target": args.missing_target}


# Settings as the command names them (a message from the library uses the Python names).
OPTION_WORDS = {"members": "--members", "features_per_split": "--features-per-split", "min_leaf": "--min-leaf",
                "depth_limit": "--depth-limit", "bins": "--bins", "draw": "--draw", "draw_fraction": "--draw-fraction",
                "vote": "--vote", "task": "--task", "seed": "--seed", "threads": "--threads",
                "missing_target": "--missing-target"}


def command_words(message: str) -> str:
    """A message that begins with a setting's Python name, with the command's option instead."""
    m = re.match(r"(\w+) (must|is) ", message)
    if m and m.group(1) in OPTION_WORDS:
        return OPTION_WORDS[m.group(1)] + message[len(m.group(1)):]
    return message


def cluster_option() -> Parser:
    """--cluster, for every command that grows members (a parent parser)."""
    p = Parser(add_help=False)
    p.add_argument("--cluster", default=None, metavar="ADDRESS",
                   help="grow the members on a Dask cluster: its scheduler's address (tcp://HOST:8786, "
                        "tls://HOST:8786) or local:N for N worker processes on this machine; the results are "
                        "the same as with local threads (needs: pip install 'baggr[cluster]')")
    return p


def _listed(item, what: str):
    """An argparse type for a comma list of items (each parsed by item): "2,4,8" -> [2, 4, 8]."""
    def parse(text: str) -> list:
        out = []
        for part in text.split(","):
            part = part.strip()
            if not part:
                raise argparse.ArgumentTypeError(f"expected a comma list of {what}, got {text!r}")
            try:
                out.append(item(part))
            except (ValueError, argparse.ArgumentTypeError):
                raise argparse.ArgumentTypeError(f"expected a comma list of {what}, got {part!r} in {text!r}") from None
        return out
    return parse


def _depth(text: str):
    return None if text.lower() in ("none", "no", "off") else int(text)


def _choice(*names):
    def parse(text: str) -> str:
        if text not in names:
            raise ValueError(text)
        return text
    return parse


def _example(text: str) -> str:
    return "example:\n" + textwrap.indent(textwrap.dedent(text).strip(), "  ")


def build_parser() -> Parser:
    common = Parser(add_help=False)
    common.add_argument("--debug", action="store_true", help="show a traceback with any error")
    ui = Parser(add_help=False)
    ui.add_argument("--no-ui", action="store_true", help="train in this process, printing plain progress lines")
    ui.add_argument("--foreground", action="store_true",
                    help="train in this process with a progress bar (Ctrl-C stops and saves)")

    cluster = cluster_option()

    settings = Parser(add_help=False)
    g = settings.add_argument_group("ensemble settings")
    g.add_argument("--members", type=int, default=100, help="number of members (trees) to grow (default 100)")
    g.add_argument("--features-per-split", type=_features_per_split, default=None, metavar="K",
                   help="features tried at each split: sqrt, log2, a whole number or a fraction "
                        "(default sqrt for classes, 1/3 for regression)")
    g.add_argument("--min-leaf", type=int, default=1, help="fewest in-bag draws in a leaf (default 1)")
    g.add_argument("--depth-limit", type=int, default=None, metavar="D", help="deepest level (default: no limit)")
    g.add_argument("--draw", choices=("bootstrap", "balanced", "subsample"), default="bootstrap",
                   help="how each member draws its rows (default bootstrap)")
    g.add_argument("--draw-fraction", type=float, default=0.632, metavar="F",
                   help="share of rows drawn by --draw subsample (default 0.632)")
    g.add_argument("--bins", type=int, default=255, help="value bins per numeric feature, 2..255 (default 255)")
    g.add_argument("--task", choices=("classes", "regression"), default=None,
                   help="default: text, whole numbers and true/false are classes; other numbers regression")
    g.add_argument("--vote", choices=("hard", "shares"), default="hard", help="how members vote (default hard)")
    g.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    g.add_argument("--threads", type=int, default=None, help="local threads (default: all cores)")
    g.add_argument("--estimate-only", action="store_true",
                   help="drop each tree after its OOB votes: the OOB estimate without a model for scoring")
    g.add_argument("--importance", action="store_true",
                   help="measure each feature's OOB permutation importance (each member's OOB rows again with "
                        "the feature's values shuffled; costs several times the member time)")
    g.add_argument("--measure", choices=MEASURES, default=None, metavar="NAME",
                   help="the figure the run is judged by: error, balanced-error, log-loss, brier or auc for "
                        "classes; mse, rmse, mae or r2 for regression (default error / mse). It heads the "
                        "report and the dashboard and decides --stop-when-stable")
    run_opts = Parser(add_help=False)
    r = run_opts.add_argument_group("run settings")
    r.add_argument("--stop-when-stable", action="store_true",
                   help="stop early once the OOB error (or the --measure) has settled within its own 95%% "
                        "interval (after at least 50 members, over the last max(25, members/5) members)")
    r.add_argument("--checkpoint-every", type=int, default=None, metavar="N",
                   help="checkpoint exactly every N members (default: every 50 members or 30 s, "
                        "whichever comes first, at most every 2 s and under 2%% of the time)")
    r.add_argument("--checkpoint-seconds", type=float, default=None, metavar="S",
                   help="checkpoint at least every S seconds (default 30)")
    r.add_argument("--run-dir", default=None, metavar="DIR",
                   help="run directory to write (default runs/<data-name>-<date>-<time>)")
    r.add_argument("--force", action="store_true", help="replace an existing run directory")

    p = Parser(prog="baggr", description="Bagged tree ensembles with a live out-of-bag (OOB) estimate.",
               formatter_class=argparse.RawDescriptionHelpFormatter,
               epilog=_example("""
                   baggr demo
                   baggr train data.csv --target outcome --members 300
                   baggr report runs/data-20250101-120000""") + "\n\nrun 'baggr COMMAND --help' for a command's options")
    from baggr.version import __version__
    p.add_argument("--version", action="version", version=f"baggr {__version__}")
    sub = p.add_subparsers(dest="command", metavar="{" + ",".join(COMMANDS) + "}", parser_class=Parser)
    sub.required = True
    raw = argparse.RawDescriptionHelpFormatter

    def add(name, help, example, parents=(), description=None):
        return sub.add_parser(name, help=help, description=description or help, epilog=_example(example),
                              formatter_class=raw, parents=[*parents, common])

    t = add("train", "train an ensemble on a table and write a run directory",
            """
            baggr train firings.csv --target outcome --members 500 --features-per-split 4
            baggr train log.csv --target weather --drop station_id --delimiter ';'""",
            (settings, run_opts, table_parser(), cluster, ui), "Train an ensemble on DATA (CSV, TSV or Parquet) and write a run directory: its "
            "config, a journal line per member, checkpoints and the model. On a terminal the job runs "
            "detached (a dropped SSH link does not end it) and the dashboard attaches; leave the dashboard "
            "and the job goes on (baggr watch DIR to return).")
    t.add_argument("data", metavar="DATA", help="the training table (.csv, .tsv, .txt, .parquet)")
    t.add_argument("--target", "-t", required=True, metavar="COL", help="the column to predict")
    t.set_defaults(func=cmd_train)

    listed = Parser(add_help=False)
    g = listed.add_argument_group("ensemble settings (a comma list makes one candidate per value)")
    g.add_argument("--members", type=_listed(int, "whole numbers"), default=[100], metavar="N[,N...]",
                   help="members (trees) of each candidate (default 100)")
    g.add_argument("--features-per-split", type=_listed(_features_per_split, "sqrt, log2, whole numbers or fractions"),
                   default=[None], metavar="K[,K...]", help="features tried at each split (default sqrt for classes, "
                   "1/3 for regression)")
    g.add_argument("--min-leaf", type=_listed(int, "whole numbers"), default=[1], metavar="N[,N...]",
                   help="fewest in-bag draws in a leaf (default 1)")
    g.add_argument("--depth-limit", type=_listed(_depth, "whole numbers or none"), default=[None], metavar="D[,D...]",
                   help="deepest level; none: no limit (default none)")
    g.add_argument("--draw", type=_listed(_choice("bootstrap", "balanced", "subsample"), "bootstrap, balanced or "
                   "subsample"), default=["bootstrap"], metavar="SCHEME[,...]",
                   help="how rows are drawn: bootstrap, balanced, subsample (default bootstrap); candidates with "
                        "other draw schemes do not share their draws")
    g.add_argument("--draw-fraction", type=_listed(float, "fractions"), default=[0.632], metavar="F[,F...]",
                   help="share of rows drawn by --draw subsample (default 0.632)")
    g.add_argument("--bins", type=_listed(int, "whole numbers"), default=[255], metavar="N[,N...]",
                   help="value bins per numeric feature, 2..255 (default 255); each bins value is binned once")
    g.add_argument("--vote", type=_listed(_choice("hard", "shares"), "hard or shares"), default=["hard"],
                   metavar="V[,V]", help="how members vote (default hard)")
    g.add_argument("--task", choices=("classes", "regression"), default=None,
                   help="default: text, whole numbers and true/false are classes; other numbers regression")
    g.add_argument("--seed", type=int, default=0, help="random seed, one for all candidates (default 0)")
    g.add_argument("--threads", type=int, default=None, help="local threads (default: all cores)")
    g.add_argument("--estimate-only", action="store_true",
                   help="drop each tree after its OOB votes: estimates without models for scoring")
    c = add("compare", "train several candidate settings on the same data and rank them fairly",
            "baggr compare firings.csv --target outcome --features-per-split 2,4,8 --min-leaf 1,5 --members 300",
            (listed, run_opts, table_parser(), cluster, ui),
            "Train one candidate per combination of the listed settings (or per line of --candidates FILE) on "
            "DATA, read and binned once, with the same seed: member m of every candidate draws the same rows, "
            "so the candidates are compared on the same OOB rows with paired tests. Candidates grow in "
            "interleaved blocks of members. Writes a comparison directory holding one ordinary run directory "
            "per candidate; baggr report DIR ranks them.")
    c.add_argument("data", metavar="DATA", help="the training table (.csv, .tsv, .txt, .parquet)")
    c.add_argument("--target", "-t", required=True, metavar="COL", help="the column to predict")
    c.add_argument("--candidates", metavar="FILE", default=None,
                   help="the candidates, one per line as setting=value pairs (min_leaf=5 features_per_split=4), "
                        "or a JSON list of objects; the options above set what a line leaves out")
    c.add_argument("--block", type=int, default=None, metavar="N",
                   help="members each candidate grows before the next takes its turn (default 25)")
    c.add_argument("--measure", default=None, metavar="NAME",
                   help="the figure to rank by: error, balanced-error, log-loss, brier, auc (classes); "
                        "mse, mae, r2 (regression); default error or mse")
    c.set_defaults(func=cmd_compare)

    rs = add("resume", "continue an interrupted run, or grow a run to more members",
             "baggr resume runs/firings-20250101-120000 --members 800", (cluster, ui),
             "Continue a stopped, failed or crashed run from its last checkpoint; the result is bit-identical "
             "to a run never interrupted. With --members N, grow a run (finished or not) to N members: "
             "bit-identical to a run of N members from the start. The data file must be unchanged. A finished "
             "run without --members is left as it is (exit 0).")
    rs.add_argument("dir", metavar="DIR", help="the run directory (or comparison directory)")
    rs.add_argument("--members", type=int, metavar="N", default=None,
                    help="grow the run to N members (above its count; --stop-when-stable no longer applies)")
    rs.set_defaults(func=cmd_resume)

    w = add("watch", "attach the dashboard to a run (running or not)", "baggr watch runs/firings-20250101-120000")
    w.add_argument("dir", metavar="DIR", help="the run directory (a comparison directory: a line a round)")
    w.set_defaults(func=cmd_watch)

    s = add("stop", "ask a running job to finish the member in hand, save and stop",
            "baggr stop runs/firings-20250101-120000 --wait")
    s.add_argument("dir", metavar="DIR", help="the run directory (a comparison directory: all its candidates)")
    s.add_argument("--wait", action="store_true", help="wait until the job has stopped")
    s.set_defaults(func=cmd_stop)

    rp = add("report", "print a run's OOB figures (finished or not)",
             "baggr report runs/firings-20250101-120000 --json > figures.json\n"
             "baggr report runs/firings-20250101-120000 --html firings.html --rows oob.csv --keep firing_id",
             description="Print a run's OOB error with its interval, the measures of the OOB predictions (AUC, "
                         "log loss, Brier, ...; MSE, MAE, R2) with their intervals, per-class errors, precision, "
                         "recall and F1, the confusion counts, coverage, where the curve settled, feature "
                         "importance (runs with --importance), members, time, settings and the data fingerprint. "
                         "Works on a finished run (model.npz), an unfinished one (its checkpoint) or a model file. "
                         "--rows, --html and --figures write files as well.")
    rp.add_argument("dir", metavar="DIR", help="a run directory, a model file, or a comparison directory (ranked)")
    rp.add_argument("--json", action="store_true", help="print one JSON object instead of tables")
    rp.add_argument("--rows", metavar="FILE", default=None,
                    help="write each training row's OOB figures (.csv, .tsv or .parquet): row, target, "
                         "left_out, prediction, share_<class> (empty cells for rows never left out)")
    rp.add_argument("--keep", metavar="COL,...", default=None,
                    help="with --rows: copy these columns of the training table (e.g. an identifier)")
    rp.add_argument("--html", metavar="FILE", default=None,
                    help="write the report as one self-contained HTML file with its figures")
    rp.add_argument("--figures", metavar="DIR", default=None, help="write the report's figures as PNG and SVG")
    rp.add_argument("--force", action="store_true", help="replace existing output files")
    rp.add_argument("--measure", default=None, metavar="NAME",
                    help="the figure the report is headed by (a run: default its own --measure; a comparison "
                         "directory: the figure to rank by, default the comparison's own)")
    rp.set_defaults(func=cmd_report)

    pr = add("predict", "score new rows with a run's model",
             "baggr predict runs/firings-20250101-120000 new-firings.csv --out scored.parquet",
             description="Write predictions for DATA: the --keep columns, a column 'prediction', then "
                         "'share_<class>' per class (the share of members voting for it); regression: 'prediction' "
                         "only. CSV or Parquet by the extension of --out. A category the model never saw is "
                         "scored as missing (one warning line counts them).")
    pr.add_argument("model", metavar="DIR_OR_MODEL", help="a run directory or a model file")
    pr.add_argument("data", metavar="DATA", help="the table to score")
    pr.add_argument("--out", "-o", required=True, metavar="FILE", help="output .csv, .tsv or .parquet")
    pr.add_argument("--force", action="store_true", help="replace an existing output file")
    pr.add_argument("--members", type=int, metavar="K", default=None,
                    help="score with the first K members only: what a run of K members gives")
    pr.add_argument("--keep", type=_columns, action="append", metavar="COL,...",
                    help="copy these columns of DATA (identifiers, say) into the output, before the predictions")
    pr.add_argument("--delimiter", type=_delimiter, default=None, metavar="CHAR",
                    help="field delimiter of a text table: a character or tab (default: from the suffix)")
    pr.set_defaults(func=cmd_predict)

    d = add("demo", "train on a built-in invented scenario and print the report",
            "baggr demo --members 100", (ui,),
            "Generate an invented table (kiln firings with a rare failure class), train on it like "
            "`baggr train`, then print the report.")
    d.add_argument("--members", type=int, default=DEMO_MEMBERS, help=f"members to grow (default {DEMO_MEMBERS})")
    d.add_argument("--rows", type=int, default=DEMO_ROWS, help=f"rows of invented data (default {DEMO_ROWS})")
    d.add_argument("--seed", type=int, default=0, help="random seed of the ensemble (default 0)")
    d.add_argument("--data-seed", type=int, default=2026, help="seed of the invented data (default 2026)")
    d.add_argument("--threads", type=int, default=None, help="local threads (default: all cores)")
    d.add_argument("--run-dir", default=None, metavar="DIR", help="run directory (default runs/demo-<date>-<time>)")
    d.add_argument("--force", action="store_true", help="replace an existing run directory")
    d.set_defaults(func=cmd_demo)

    j = sub.add_parser("_job", parents=[common])      # the detached job itself; not for people
    j.add_argument("dir")
    j.add_argument("--verify", action="store_true")
    j.add_argument("--cluster", default=None)
    j.set_defaults(func=cmd_job)
    return p


DEMO_MEMBERS = 300
DEMO_ROWS = 6000


def main(argv=None) -> int:
    """Run the command line; returns the exit code (2: a user error, 1: an internal error)."""
    args = build_parser().parse_args(argv)
    debug = getattr(args, "debug", False)
    try:
        return int(args.func(args) or 0)
    except BaggrError as e:
        if debug:
            traceback.print_exc()
        sys.stderr.write(f"baggr: error: {command_words(str(e))}\n")
        return 2
    except KeyboardInterrupt:
        sys.stderr.write("baggr: interrupted\n")
        return 130
    except Exception as e:   # noqa: BLE001 - the last line of defence: one line unless --debug
        if debug:
            traceback.print_exc()
        msg = str(e).strip().splitlines()[0] if str(e).strip() else ""
        sys.stderr.write(f"baggr: internal error: {type(e).__name__}{': ' + msg if msg else ''} "
                         "(run with --debug for details)\n")
        return 1


if __name__ == "__main__":
    sys.exit(main())
