"""Files `baggr report` and `baggr predict` write: tables (CSV, TSV, Parquet), the per-row OOB
export (--rows, --keep), the HTML report (--html) and its figures (--figures)."""
from __future__ import annotations

import os
import tempfile
from pathlib import Path

from baggr.atomic import ordinary_mode
from baggr.errors import BaggrError, ConfigError

OUT_KINDS = {".csv": "csv", ".tsv": "tsv", ".parquet": "parquet", ".pq": "parquet"}


def table_kind(out: Path, option: str = "--out") -> str:
    kind = OUT_KINDS.get(out.suffix.lower())
    if kind is None:
        raise ConfigError(f"{option} must end in .csv, .tsv, .parquet or .pq, got {out.name!r}")
    return kind


def check_new(out: Path, force: bool) -> Path:
    """out, when it may be written: not there yet (or force), in a folder that exists."""
    if (out.exists() or out.is_symlink()) and not force:
        raise BaggrError(f"{out} already exists (use --force to replace it)")
    if not out.parent.resolve().is_dir():
        raise BaggrError(f"cannot write {out}: folder {out.parent} does not exist")
    return out


def write_atomic(out: Path, write) -> None:
    """Write via a temp file and rename: a failed write never leaves half a file under the asked name.
    write(tmp_path) writes the file."""
    fd, tmp = tempfile.mkstemp(prefix=".tmp-", suffix=out.suffix, dir=out.parent.resolve())
    os.close(fd)
    try:
        ordinary_mode(tmp)     # as an ordinary new file (mkstemp makes it private)
        write(tmp)
        os.replace(tmp, out)
    except OSError as e:
        raise BaggrError(f"cannot write {out}: {e.strerror or e}") from None
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def write_table(table, out: Path, kind: str) -> None:
    """An Arrow table to a CSV, TSV or Parquet file (atomically)."""
    def write(tmp):
        if kind == "parquet":
            import pyarrow.parquet as pq
            pq.write_table(table, tmp)
        else:
            import pyarrow.csv as pacsv
            pacsv.write_csv(table, tmp, write_options=pacsv.WriteOptions(delimiter="\t" if kind == "tsv" else ","))
    write_atomic(out, write)


# ---------------------------------------------------------------- --rows

def rows_table(r, keep: list[str] | None = None):
    """One line per training row: row (its data row in the training file, counting from 0), target,
    left_out (times out of bag), prediction (the OOB class or value) and share_<class> per class;
    the kept columns of the training table first. A row never left out has empty cells, not zeros.
    Rows the run left out for a missing target are not in it (their numbers are skipped)."""
    import numpy as np
    import pyarrow as pa
    oob = r.oob
    a = oob.arrays()
    n = oob.left_out.shape[0]
    table = where = None
    if keep or "target" not in a or r.missing_target:
        table, where = _training_rows(r, n)
    cols = {}
    if keep:
        missing = [c for c in keep if c not in table.column_names]
        if missing:
            raise ConfigError(f"--keep: the training table has no column {missing[0]!r} "
                              f"(it has {', '.join(table.column_names[:8])}{', ...' if table.num_columns > 8 else ''})")
        if len(set(keep)) != len(keep):
            raise ConfigError("--keep names a column twice")
        clash = [c for c in keep if c in ("row", "target", "left_out", "prediction") or c.startswith("share_")]
        if clash:
            raise ConfigError(f"--keep: column {clash[0]!r} would clash with a column the export writes")
        for c in keep:
            cols[c] = table.column(c).take(pa.array(where))
    uncovered = oob.left_out == 0
    cols["row"] = pa.array(np.arange(n, dtype=np.int64) if where is None else where.astype(np.int64))
    if "target" in a:
        t = a["target"]
        cols["target"] = pa.array([r.schema.classes[k] for k in t]) if r.task == "classes" else pa.array(t)
    else:
        cols["target"] = table.column(r.run.get("target") or r.schema.target).take(pa.array(where))
    cols["left_out"] = pa.array(oob.left_out.astype(np.int64))
    if r.task == "classes":
        cols["prediction"] = pa.array(list(oob.prediction))       # None where never left out
        shares = oob.shares
        for k, c in enumerate(r.schema.classes):
            cols[f"share_{c}"] = pa.array(shares[:, k], mask=uncovered)
    else:
        cols["prediction"] = pa.array(np.asarray(oob.prediction, np.float64), mask=uncovered)
    return pa.table(cols)


def _training_rows(r, n: int):
    """(the run's training file as a table, the data rows it trained on): the very file, read as the
    run read it, less the rows whose target was missing when the run left those out."""
    import numpy as np
    data = r.run.get("data") if r.run else None
    if not data:
        raise ConfigError("--keep needs a run directory (a model file does not name its training data)")
    from baggr.runs import check_data
    check_data(data)
    from baggr.data.schema import missing_targets
    from baggr.data.table import read_table
    opts = r.run.get("table") or {}
    table = read_table(data["path"], delimiter=opts.get("delimiter"))     # a file: an Arrow table
    where = np.arange(table.num_rows)
    target = r.run.get("target")
    if opts.get("missing_target", "drop") == "drop" and target in table.column_names:
        where = np.flatnonzero(~missing_targets(table.column(target)))
    if where.shape[0] != n:
        raise BaggrError(f"{data['path']} has {where.shape[0]:,} rows with a target, the run {n:,}")
    return table, where


def write_rows(r, out: Path, keep: list[str] | None, force: bool) -> str:
    kind = table_kind(out, "--rows")
    check_new(out, force)
    t = rows_table(r, keep)
    write_table(t, out, kind)
    return f"wrote {t.num_rows:,} rows of OOB figures to {out}"


# ---------------------------------------------------------------- --html, --figures

def write_html(r, d: dict, out: Path, force: bool) -> str:
    from baggr.cli import html
    return _write_page(out, force, lambda: html.render(d, r.oob), "the report")


def write_figures(r, d: dict, folder: Path, force: bool) -> str:
    from baggr.cli import html
    _figures_folder(folder, force, ("curve", "measure", "importance", "confusion", "reliability"))
    paths = html.write_figures(d, r.oob, folder)
    return f"wrote {len(paths)} figure files (PNG and SVG) to {folder}"


def write_comparison_html(cr, out: Path, force: bool) -> str:
    """A comparison's page (cr: cli.compare_report.ComparisonReport)."""
    from baggr.cli import compare_html
    return _write_page(out, force, lambda: compare_html.render(cr), "the comparison")


def write_comparison_figures(cr, folder: Path, force: bool) -> str:
    from baggr.cli import compare_html
    _figures_folder(folder, force, ("curves", "measures", "differences"))
    paths = compare_html.write_figures(cr, folder)
    return f"wrote {len(paths)} figure files (PNG and SVG) to {folder}"


def _write_page(out: Path, force: bool, make, what: str) -> str:
    if out.suffix.lower() not in (".html", ".htm"):
        raise ConfigError(f"--html must end in .html or .htm, got {out.name!r}")
    check_new(out, force)
    text = make()
    write_atomic(out, lambda tmp: Path(tmp).write_text(text, encoding="utf-8"))
    return f"wrote {what} to {out} ({len(text.encode('utf-8')) // 1024:,} KiB, self-contained)"


def _figures_folder(folder: Path, force: bool, names) -> None:
    """Make the folder for --figures; refuse one that holds figures of these names, unless force."""
    if folder.exists() and not folder.is_dir():
        raise BaggrError(f"--figures: {folder} is a file, not a folder")
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise BaggrError(f"cannot make the folder {folder}: {e.strerror or e}") from None
    there = [f.name for f in folder.iterdir()]
    if not force and any(n.split(".")[0] in names and n.endswith((".png", ".svg")) for n in there):
        raise BaggrError(f"{folder} already holds figures (use --force to replace them)")
