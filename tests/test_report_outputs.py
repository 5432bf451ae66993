"""`baggr report`: the measures in --json, the per-row export (--rows, --keep), the HTML report
(--html, opened in a real headless browser) and --figures."""
import html
import json
import os
import re
import shutil
import subprocess
import sys

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
import pytest

import baggr
from generators import friedman1, waveform

BAGGR = [sys.executable, "-m", "baggr.cli"]
CHROMIUM = "/usr/bin/chromium"


def _run(*args, ok=True):
    r = subprocess.run(BAGGR + [str(a) for a in args], capture_output=True, text=True)
    if ok:
        assert r.returncode == 0, r.stderr
    return r


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """A three-class run with --importance and --measure auc (few members: some rows never left
    out), and a regression run."""
    base = tmp_path_factory.mktemp("outputs")
    X, y = waveform(500, seed=1)
    cols = {f"w{i}": X[:, i] for i in range(21)}
    cols["serial"] = np.arange(1000, 1500)
    cols["shape"] = np.array(["arc", "bump", "crest"])[y]
    pacsv.write_csv(pa.table(cols), base / "wave.csv")
    _run("train", base / "wave.csv", "--target", "shape", "--members", "4", "--importance", "--measure", "auc",
         "--seed", "2", "--no-ui", "--run-dir", base / "classes")
    X, y = friedman1(300, seed=3)
    pacsv.write_csv(pa.table({**{f"x{i + 1}": X[:, i] for i in range(10)}, "y": y}), base / "f1.csv")
    _run("train", base / "f1.csv", "--target", "y", "--members", "30", "--measure", "mae", "--seed", "4", "--no-ui",
         "--run-dir", base / "regression")
    return base


def test_json_has_every_measure_with_value_and_interval(runs):
    d = json.loads(_run("report", runs / "classes", "--json").stdout)
    assert d["measure"] == "auc"
    assert list(d["measures"]) == ["error", "balanced-error", "log-loss", "brier", "auc"]
    for name, m in d["measures"].items():
        lo, hi = m["interval"]
        assert lo <= m["value"] <= hi, name
    assert d["measures"]["error"]["value"] == d["oob_error"]        # the error follows the run's own estimate
    assert [c["class"] for c in d["class_measures"]] == ["arc", "bump", "crest"]
    # precision of class k from the confusion counts (rows true, columns predicted; by hand)
    cm = np.array(d["confusion"])
    for k, c in enumerate(d["class_measures"]):
        assert c["precision"]["value"] == pytest.approx(cm[k, k] / cm[:, k].sum())
        assert c["recall"]["value"] == pytest.approx(cm[k, k] / cm[k].sum())
    assert [r["feature"] for r in d["importance"]] == [f"w{i}" for i in range(21)] + ["serial"]
    assert set(d["importance_by_class"]) == {"arc", "bump", "crest"}
    assert d["measure_curve"]["sizes"] == [1, 2, 3, 4] and len(d["measure_curve"]["auc"]) == 4
    # report --measure heads a run's report by another measure; one that does not fit is one line
    assert json.loads(_run("report", runs / "classes", "--measure", "log-loss", "--json").stdout)["measure"] == "log-loss"
    bad = _run("report", runs / "classes", "--measure", "mae", ok=False)
    assert bad.returncode == 2 and "does not fit classes" in bad.stderr
    # the text report shows the per-class importance too: the leading feature's rise for each class
    text = _run("report", runs / "classes").stdout
    top = max(d["importance"], key=lambda r: r["mean"])["feature"]
    line = next(x for x in text.splitlines()[text.splitlines().index(next(x for x in text.splitlines()
                                                                          if x.strip().startswith("by class"))):]
                if x.split() and x.split()[0] == top)
    for c in ("arc", "bump", "crest"):
        w = next(r for r in d["importance_by_class"][c] if r["feature"] == top)
        assert f"{w['mean']:.3f} ± {w['se']:.3f}" in line
    r = json.loads(_run("report", runs / "regression", "--json").stdout)
    assert r["measure"] == "mae" and list(r["measures"]) == ["mse", "rmse", "mae", "r2"]
    assert r["measures"]["mse"]["value"] == r["oob_error"]
    assert r["measures"]["r2"]["value"] == pytest.approx(r["r2"], rel=1e-9)   # two computations of one figure
    assert r["measures"]["rmse"]["value"] == pytest.approx(np.sqrt(r["oob_error"]))
    text = _run("report", runs / "regression").stdout
    # the measures are the kept ensemble's estimates (their interval's method says so); the textbook
    # figure's method stays in the JSON (raw_method)
    assert "MAE" in text and "infinitesimal jackknife" in text
    assert r["measures"]["r2"]["raw_method"] == "delta method, normal" and r["measures"]["r2"]["corrected"]


def test_measure_must_fit_the_target(runs, tmp_path):
    r = _run("train", runs / "f1.csv", "--target", "y", "--members", "3", "--measure", "auc", "--no-ui",
             "--run-dir", tmp_path / "bad", ok=False)
    assert r.returncode == 2 and "measure 'auc' does not fit a regression target" in r.stderr
    assert "Traceback" not in r.stderr


@pytest.mark.parametrize("ext", ["csv", "tsv", "parquet"])
def test_rows_equal_the_oob_view(runs, tmp_path, ext):
    out = tmp_path / f"rows.{ext}"
    _run("report", runs / "classes", "--rows", out, "--keep", "serial")
    if ext == "parquet":
        t = pq.read_table(out)
    else:
        # an empty cell reads as missing (pyarrow reads empty text as "" unless told)
        t = pacsv.read_csv(out, parse_options=pacsv.ParseOptions(delimiter="\t" if ext == "tsv" else ","),
                           convert_options=pacsv.ConvertOptions(strings_can_be_null=True))
    ens = baggr.load(runs / "classes" / "model.npz")
    oob = ens.oob
    assert t.column_names == ["serial", "row", "target", "left_out", "prediction", "share_arc", "share_bump",
                              "share_crest"]
    assert t.column("serial").to_pylist() == list(range(1000, 1500))
    assert t.column("row").to_pylist() == list(range(500))
    np.testing.assert_array_equal(t.column("left_out").to_numpy(), oob.left_out)
    assert t.column("prediction").to_pylist() == list(oob.prediction)          # None where never left out
    never = oob.left_out == 0
    assert never.sum() > 0                                                   # 4 members: some rows never out
    for k, c in enumerate(["arc", "bump", "crest"]):
        col = t.column(f"share_{c}")
        assert col.null_count == never.sum()                                 # empty cells, not zeros
        np.testing.assert_array_equal(col.to_numpy(zero_copy_only=False)[~never], oob.shares[~never, k])
    X, y = waveform(500, seed=1)
    assert t.column("target").to_pylist() == list(np.array(["arc", "bump", "crest"])[y])


def test_rows_of_a_regression_run_and_the_errors_a_user_can_make(runs, tmp_path):
    out = tmp_path / "r.csv"
    _run("report", runs / "regression", "--rows", out)
    t = pacsv.read_csv(out)
    ens = baggr.load(runs / "regression" / "model.npz")
    np.testing.assert_allclose(t.column("prediction").to_numpy(), ens.oob.prediction, rtol=1e-15)
    r = _run("report", runs / "regression", "--rows", out, ok=False)
    assert r.returncode == 2 and "already exists" in r.stderr
    r = _run("report", runs / "regression", "--rows", tmp_path / "r.txt", ok=False)
    assert r.returncode == 2 and "--rows must end in" in r.stderr
    r = _run("report", runs / "regression", "--rows", tmp_path / "k.csv", "--keep", "nope", ok=False)
    assert r.returncode == 2 and "no column 'nope'" in r.stderr
    r = _run("report", runs / "regression" / "model.npz", "--rows", tmp_path / "k.csv", "--keep", "x1", ok=False)
    assert r.returncode == 2 and "--keep needs a run directory" in r.stderr
    r = _run("report", runs / "regression", "--keep", "x1", ok=False)
    assert r.returncode == 2 and "--keep goes with --rows" in r.stderr


def test_figures_are_written_as_png_and_svg(runs, tmp_path):
    _run("report", runs / "classes", "--figures", tmp_path / "figs")
    names = sorted(os.listdir(tmp_path / "figs"))
    assert names == sorted(f"{n}.{e}" for n in ("curve", "measure", "importance", "confusion", "reliability")
                           for e in ("png", "svg"))
    assert (tmp_path / "figs" / "curve.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"   # the PNG signature
    assert b"<svg" in (tmp_path / "figs" / "confusion.svg").read_bytes()[:400]
    _run("report", runs / "regression", "--figures", tmp_path / "rfigs")
    assert sorted(os.listdir(tmp_path / "rfigs")) == sorted(f"{n}.{e}" for n in ("curve", "measure", "reliability")
                                                            for e in ("png", "svg"))


# Run before the page's own content: records every resource the page fetches and every load a
# content security rule stopped, then (on load) whether each image decoded and each table's scrolled
# and shown widths, into the DOM.
PROBE = """<script>
var blocked = [];
document.addEventListener('securitypolicyviolation', function (e) { blocked.push(e.blockedURI); });
window.addEventListener('load', function () {
  var imgs = Array.prototype.map.call(document.images, function (i) { return [i.complete, i.naturalWidth]; });
  var fetched = performance.getEntriesByType('resource').map(function (r) { return r.name; });
  var wide = Array.prototype.map.call(document.querySelectorAll('div.wide'),
                                      function (d) { return [d.scrollWidth, d.clientWidth]; });
  document.body.setAttribute('data-probe', JSON.stringify({images: imgs, fetched: fetched, blocked: blocked,
                                                           wide: wide}));
});
</script>"""


NEEDS_CHROMIUM = pytest.mark.skipif(not os.path.exists(CHROMIUM), reason="needs Debian's chromium at /usr/bin/chromium "
                                    "(.ci/run installs it: apt-get install -y chromium)")


def open_in_chromium(page, tmp_path) -> tuple[str, dict]:
    """Check that a page loads nothing from outside its file, open it in headless chromium with a
    probe first in <head>, and return (the rendered DOM, what the probe saw)."""
    text = page.read_text()
    # nothing outside the file: every src and href is a data: URI or an anchor, no url() in the style
    assert not re.search(r"""(src|href)=["'](?!data:|#)""", text)
    assert "url(" not in text and "@import" not in text
    # the probe goes first in <head>; the page's own rules stay, with inline scripts allowed for it
    probed = text.replace("<head>", "<head>" + PROBE, 1).replace("default-src 'none';",
                                                                  "default-src 'none'; script-src 'unsafe-inline';")
    (tmp_path / "probed.html").write_text(probed)
    profile = tmp_path / "profile"
    cmd = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
           "--disable-background-networking", "--disable-component-update", "--disable-sync",
           f"--user-data-dir={profile}", "--virtual-time-budget=10000", "--window-size=1200,900", "--dump-dom",
           (tmp_path / "probed.html").as_uri()]
    r = subprocess.run(cmd, capture_output=True, text=True, timeout=120)
    shutil.rmtree(profile, ignore_errors=True)
    m = re.search(r"data-probe=\"([^\"]*)\"", r.stdout)
    assert m, r.stdout[:500] + r.stderr[-2000:]
    probe = json.loads(m.group(1).replace("&quot;", '"').replace("&amp;", "&"))
    assert len(probe["images"]) == text.count('src="data:image/')
    assert all(done and width > 0 for done, width in probe["images"]), probe["images"]
    assert probe["fetched"] == [] and probe["blocked"] == []
    # in a window 1200 pixels wide, no table scrolls sideways
    assert all(scrolled <= shown for scrolled, shown in probe["wide"]), probe["wide"]
    return r.stdout, probe


@NEEDS_CHROMIUM
@pytest.mark.parametrize("run", ["classes", "regression"])
def test_html_report_renders_offline_in_a_headless_browser(runs, tmp_path, run):
    page = tmp_path / "report.html"
    _run("report", runs / run, "--html", page)
    assert page.read_text().count('src="data:image/') == (5 if run == "classes" else 3)
    dom, _ = open_in_chromium(page, tmp_path)
    assert "Read with care" in dom and "Measures of the OOB predictions" in dom
    # settings in the command's words: yes/no and none, not Python's True/False/None (common practice, no source)
    settings = dom[dom.index("<h2>Settings</h2>"):dom.index("<h2>Data</h2>")]
    assert ">True<" not in settings and ">False<" not in settings and ">None<" not in settings
    assert ">yes<" in settings
    # the measure the run was judged by (these runs chose one; without, the page names the default)
    assert (">auc<" if run == "classes" else ">mae<") in settings and "(the default)" not in settings
    d = json.loads(_run("report", runs / run, "--json").stdout)
    if run == "classes":
        # error-type figures as percentages, as the screens write them (baggr.units)
        assert f"{100 * d['oob_error']:.2f}%" in dom
        assert f"{100 * d['measures']['balanced-error']['value']:.2f}%" in dom
        assert f"{100 * d['class_error'][0]:.2f}%" in dom
        # the size to choose and the limit, as report --json gives them (issue 12: shown in the report)
        assert f'<div class="k">members needed</div><div class="v">{d["members_needed"]:,}</div>' in dom
        assert f"error limit {100 * d['error_limit']:.2f}%" in dom
        # per-class importance, compactly: mean and SE of each class's rise
        assert "Permutation importance by class" in dom
        top = max(d["importance"], key=lambda r: r["mean"])["feature"]
        w = next(r for r in d["importance_by_class"]["bump"] if r["feature"] == top)
        assert f"{w['mean']:.3f} <span class=\"ivl\">± {w['se']:.3f}</span>" in dom
    else:
        assert f"{d['oob_error']:.4g}" in dom


@pytest.fixture(scope="module")
def comparison(runs):
    """Three candidates on the three-class table, ranked on log loss."""
    out = runs / "cmp"
    _run("compare", runs / "wave.csv", "--target", "shape", "--drop", "serial", "--features-per-split", "2,5,21",
         "--members", "12", "--block", "6", "--measure", "log-loss", "--seed", "5", "--no-ui", "--run-dir", out)
    return out


@NEEDS_CHROMIUM
def test_comparison_html_renders_offline_and_holds_the_ranked_table(comparison, tmp_path):
    page = tmp_path / "cmp.html"
    _run("report", comparison, "--html", page)
    text = page.read_text()
    assert text.count('src="data:image/') == 3          # the differences, the error curves, the log loss curves
    dom, _ = open_in_chromium(page, tmp_path)
    d = json.loads(_run("report", comparison, "--json").stdout)
    ranked = re.search(r'<table class="ranked">(.*?)</table>', dom, re.S).group(1)
    body = re.findall(r"<tr[^>]*>(.*?)</tr>", ranked.split("</thead>")[1], re.S)
    assert len(body) == 3
    for row, c in zip(body, d["candidates"]):
        cells = [html.unescape(re.sub(r"<[^>]+>", "", x)) for x in re.findall(r"<td[^>]*>(.*?)</td>", row, re.S)]
        # the JSON's figures, rounded as the page writes them (common practice, no source)
        assert cells[1] == f"c{c['number']}" and cells[2] == str(c["settings"]["features_per_split"])
        assert cells[4] == f"{c['value']:.4f}"
        assert cells[5] == f"{c['interval'][0]:.4f} – {c['interval'][1]:.4f}"
        assert cells[6] == (f"{c['members_needed']:,}" if c["members_needed"] else "-")
        spm = c["seconds_per_member"]           # a short span in ms, to three figures
        assert cells[7] == (f"{spm * 1000:.3g} ms" if spm < 1 else f"{spm:.3g} s")
        if c["difference"] is not None:
            assert cells[8] == f"{c['difference']:+.4f}"
            assert cells[10] == ("<0.0001" if c["p_value"] < 1e-4 else f"{c['p_value']:.4f}")
            assert cells[11] == ("close" if c["close"] else "")
    assert "best" in body[0] and 'class="chosen"' in ranked
    assert "common random numbers" in dom and "winner&#x27;s curse" in text
    assert "Holm" in dom and "SHA-256" in dom
    sha = json.loads((comparison / "comparison.json").read_text())["data"]["sha256"]
    assert sha in dom
    # --figures: the same three, as PNG and SVG
    _run("report", comparison, "--figures", tmp_path / "figs")
    assert sorted(os.listdir(tmp_path / "figs")) == sorted(f"{n}.{e}" for n in ("curves", "measures", "differences")
                                                           for e in ("png", "svg"))
    bad = _run("report", comparison, "--rows", tmp_path / "r.csv", ok=False)
    assert bad.returncode == 2 and "is a comparison" in bad.stderr


def test_rows_number_the_file_and_keep_a_dropped_identifier(tmp_path):
    # An identifier column left out of training with --drop is copied by --keep, and rows left out
    # for a missing target keep their place in the numbering (the file's data rows, from 0).
    X, y = waveform(300, seed=9)
    label = np.array(["arc", "bump", "crest"], dtype=object)[y]
    label[[5, 17, 200]] = None
    cols = {f"w{i}": X[:, i] for i in range(21)}
    cols["id"] = [f"case-{i:04d}" for i in range(300)]
    cols["shape"] = pa.array(list(label), pa.string())
    pacsv.write_csv(pa.table(cols), tmp_path / "w.csv")
    _run("train", tmp_path / "w.csv", "--target", "shape", "--drop", "id", "--members", "6", "--no-ui",
         "--run-dir", tmp_path / "run")
    _run("report", tmp_path / "run", "--rows", tmp_path / "rows.parquet", "--keep", "id")
    t = pq.read_table(tmp_path / "rows.parquet")
    kept = [i for i in range(300) if i not in (5, 17, 200)]
    assert t.column("row").to_pylist() == kept
    assert t.column("id").to_pylist() == [f"case-{i:04d}" for i in kept]
    assert t.column("target").to_pylist() == [label[i] for i in kept]
