"""Reports from results.json alone: HTML, Markdown and LaTeX carry the file's numbers, the HTML
page is self-contained and renders in a headless browser, and every reading sentence
follows the numbers of contrasting designs."""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from cli_support import DEMO_SPEC, ENV, REPO
from typer.testing import CliRunner

from strativ.cli.app import app
from strativ.cli.report_figures import COLOURS
from strativ.cli.report_words import near_half_weights
from strativ.cli.results_read import read_results

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
TEX = shutil.which("pdflatex")
BROWSER_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                 "--no-first-run", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--hide-scrollbars",
                 "--enable-logging=stderr", "--v=0"]


def _invoke(*args: str) -> Any:
    result = CliRunner().invoke(app, list(args), env=ENV)
    assert result.exit_code == 0, result.output
    return result


@pytest.fixture(scope="module")
def demo_results(tmp_path_factory) -> Path:
    """The demo run's results.json, with its data deleted after the run."""
    root = tmp_path_factory.mktemp("demo")
    shutil.copytree(REPO / "demo_data", root / "data")
    spec = root / "spec.yaml"
    spec.write_text(DEMO_SPEC.read_text(encoding="utf-8").replace("../demo_data/", "data/"),
                    encoding="utf-8")
    _invoke("run", str(spec), "--out", str(root / "out"), "--quiet")
    shutil.rmtree(root / "data")
    spec.unlink()
    reports = root / "reports"
    _invoke("report", str(root / "out" / "results.json"), "--out", str(reports),
            "-f", "html", "-f", "md", "-f", "tex", "--figures", "svg")
    return root / "out" / "results.json"


def _reports(results: Path) -> Path:
    return results.parent.parent / "reports"


def _number(text: str) -> float | None:
    """A table cell as a number (None for the undefined mark)."""
    text = text.strip().replace("$", "").replace("\\%", "%").replace("\u2212", "-")
    if text in ("\u2013", "--"):
        return None
    power = re.fullmatch(r"(-?[\d.]+)\\times 10\^\{(-?\d+)\}", text)
    if power:
        return float(power.group(1)) * 10 ** int(power.group(2))
    return float(text[:-1]) / 100 if text.endswith("%") else float(text)


def _interval(text: str) -> list[float]:
    low, high = text.strip().replace("$", "")[1:-1].split(", ")
    return [_number(low), _number(high)]


def _close(shown: float | None, value: float | None, digits: int = 4) -> bool:
    """Whether `shown` is `value` rounded to about `digits` significant digits."""
    if value is None:
        return shown is None
    return shown is not None and abs(shown - value) <= 10 ** -(digits - 1) * max(abs(value),
                                                                               1e-300)


def _markdown_tables(text: str) -> list[list[list[str]]]:
    tables, current = [], []
    for line in text.splitlines():
        if line.startswith("|"):
            current.append([c.strip() for c in line.strip("|").split(" | ")])
        elif current:
            tables.append(current[2:])  # without the head and the rule
            current = []
    return tables


def _latex_tables(text: str) -> list[list[list[str]]]:
    out = []
    for body in re.findall(r"\\midrule\n(.*?)\\bottomrule", text, flags=re.S):
        out.append([[c.strip() for c in row.split(" & ")]
                    for row in body.strip().split(" \\\\\n") if row.strip()])
        out[-1][-1][-1] = out[-1][-1][-1].removesuffix(" \\\\")
    return out


def _html_tables(text: str) -> list[list[list[str]]]:
    out = []
    for body in re.findall(r"<tbody>(.*?)</tbody>", text, flags=re.S):
        rows = re.findall(r"<tr>(.*?)</tr>", body, flags=re.S)
        out.append([[re.sub(r"<.*?>", "", c) for c in re.findall(r"<td>(.*?)</td>", row)]
                    for row in rows])
    return out


def _check_tables(tables: list[list[list[str]]], doc: dict[str, Any]) -> None:
    """The comparison and stratum tables of every outcome carry results.json's numbers."""
    for k, comparison in enumerate(doc["comparisons"]):
        outcome = comparison["outcome"]
        rows, strata = tables[2 * k], tables[2 * k + 1]
        estimates = [e for e in doc["estimates"] if e["outcome"] == outcome]
        for row, e in zip(rows, estimates, strict=False):
            # reference: results.json of the same run
            assert _close(_number(row[1]), e["estimate"]), (row, e["estimate"])
            assert _close(_number(row[2]), e["std_error"])
            assert all(_close(a, b) for a, b in zip(_interval(row[3]), e["interval"],
                                                    strict=True))
            assert _number(row[5]) == e["n_strata"] and _number(row[6]) == e["n_units"]
        want = [s for s in doc["strata"] if s["outcome"] == outcome]
        assert len(strata) == len(want)
        for row, s in zip(strata, want, strict=True):
            assert row[0].replace("\\_", "_") == str(s["label"]) and _number(row[1]) == s["n"]
            assert abs(_number(row[2]) - s["offer_share"]) <= 0.0005
            assert _close(_number(row[7]), s["effect"])
            assert _close(_number(row[9]), s["weight_fixed_effects"], digits=3)
            assert _close(_number(row[10]), s["weight_complier"], digits=3)


def test_every_format_carries_the_numbers_of_results_json(demo_results) -> None:
    doc = json.loads(demo_results.read_text(encoding="utf-8"))
    folder = _reports(demo_results)
    assert not (demo_results.parent.parent / "data").exists()  # made from the file alone
    _check_tables(_markdown_tables((folder / "report.md").read_text(encoding="utf-8")), doc)
    _check_tables(_latex_tables((folder / "report.tex").read_text(encoding="utf-8")), doc)
    _check_tables(_html_tables((folder / "report.html").read_text(encoding="utf-8")), doc)
    for name in ("weights_gas_therms.svg", "first_stage_behind_on_bills.svg"):
        assert (folder / name).read_text(encoding="utf-8").startswith("<svg")


def test_the_html_page_is_self_contained(demo_results) -> None:
    html = (_reports(demo_results) / "report.html").read_text(encoding="utf-8")
    assert "Content-Security-Policy" in html and "default-src 'none'" in html
    assert not re.search(r"""(src|href)\s*=\s*["']?(https?:|//)""", html)
    assert "<script" not in html and "<link" not in html
    assert html.count("<svg") == 4  # two figures per outcome
    assert not any(line != line.rstrip() for line in html.splitlines())


def _browse(page: Path, shot: Path, profile: Path) -> str:
    done = subprocess.run([CHROMIUM, *BROWSER_FLAGS, f"--user-data-dir={profile}",
                           "--window-size=1200,1800", f"--screenshot={shot}", page.as_uri()],
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr[-2000:]
    return done.stderr


@pytest.mark.skipif(CHROMIUM is None and not os.environ.get("STRATIV_REQUIRE_BROWSER"),
                    reason="no chromium on this machine (CI sets STRATIV_REQUIRE_BROWSER)")
def test_the_html_page_renders_in_chromium_without_console_errors(demo_results,
                                                                  tmp_path) -> None:
    import matplotlib.image

    assert CHROMIUM is not None, "chromium is required here: install Debian's chromium"

    log = _browse(_reports(demo_results) / "report.html", tmp_path / "shot.png",
                  tmp_path / "profile")
    assert ":CONSOLE" not in log, [line for line in log.splitlines() if ":CONSOLE" in line]
    pixels = (matplotlib.image.imread(tmp_path / "shot.png")[..., :3] * 255).round()
    for name in ("fixed_effects", "complier"):
        colour = np.array([int(COLOURS[name][i:i + 2], 16) for i in (1, 3, 5)])
        hits = (np.abs(pixels - colour).max(axis=2) <= 12).sum()
        # by construction: the weight figure's markers are drawn in these two colours
        assert hits > 2000, (name, hits)
    # the check can fail: a page that requests a remote image logs a console message
    bad = tmp_path / "bad.html"
    bad.write_text(html_with_remote_image(), encoding="utf-8")
    assert ":CONSOLE" in _browse(bad, tmp_path / "bad.png", tmp_path / "profile2")


def html_with_remote_image() -> str:
    """The report's head with a remote image in the body."""
    return ("<!DOCTYPE html><html><head><meta http-equiv=\"Content-Security-Policy\" "
            "content=\"default-src 'none'; img-src data:\"></head><body>"
            "<img src=\"http://example.invalid/a.png\"></body></html>")


@pytest.mark.skipif(TEX is None, reason="no TeX engine on this machine")
def test_the_latex_report_compiles(demo_results, tmp_path) -> None:
    shutil.copy(_reports(demo_results) / "report.tex", tmp_path / "report.tex")
    done = subprocess.run([TEX, "-interaction=nonstopmode", "-halt-on-error", "report.tex"],
                          cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stdout[-3000:]
    assert (tmp_path / "report.pdf").stat().st_size > 1000


def test_on_the_demo_near_half_strata_carry_more_fixed_effects_weight(demo_results) -> None:
    back = read_results(demo_results)
    count, fe, cw = near_half_weights(back.outcomes[0])
    # source: fixed effects weight strata by p(1 - p), largest at one half (Angrist 1998)
    assert count > 0 and fe > cw + 0.05
    md = (_reports(demo_results) / "report.md").read_text(encoding="utf-8")
    assert f"hold {fe:.0%} of the fixed-effects weight, more than the {cw:.0%}" in md


def test_run_writes_the_same_reports_as_report(tmp_path, demo_results) -> None:
    """`run` with report formats builds them from its results.json document."""
    spec = tmp_path / "spec.yaml"
    spec.write_text(DEMO_SPEC.read_text(encoding="utf-8").replace(
        "../demo_data/", str(REPO / "demo_data") + "/"), encoding="utf-8")
    _invoke("run", str(spec), "--out", str(tmp_path / "out"), "-q", "-f", "json", "-f", "md")
    _invoke("report", str(tmp_path / "out"), "-f", "md", "--out", str(tmp_path / "again"))
    assert (tmp_path / "out" / "report.md").read_bytes() == \
        (tmp_path / "again" / "report.md").read_bytes()
    assert not (tmp_path / "out" / "strata.csv").exists()


def _design(root: Path, *, fe_above: bool, weak: bool, seed: int) -> dict[str, Any]:
    """Eight strata with offer shares 0.2-0.8; the effect is largest (fe_above) or smallest
    near one half, so fixed effects lies above or below the LATE; take-up is 0.8 among the
    offered and 0 among the others (strong), or 0.03 against 0.02 (weak)."""
    rng = np.random.default_rng(seed)
    shares = np.array([0.2, 0.3, 0.4, 0.5, 0.5, 0.6, 0.7, 0.8])
    n = 60 if weak else 1500
    frames = []
    for s, share in enumerate(shares):
        near = 1.0 - abs(share - 0.5) / 0.3
        effect = 1.0 + (4.0 * near if fe_above else 4.0 * (1.0 - near))
        z = (np.arange(n) < round(share * n)).astype(int)
        d = (rng.random(n) < np.where(z == 1, 0.03 if weak else 0.8, 0.02 if weak else 0.0)
             ).astype(int)
        y = effect * d + rng.standard_normal(n)
        frames.append(pd.DataFrame({"site": f"s{s}", "z": z, "d": d, "y": np.round(y, 5)}))
    pd.concat(frames).to_csv(root / "data.csv", index=False)
    (root / "spec.yaml").write_text(
        "data: data.csv\ncolumns:\n  outcome: y\n  take_up: d\n  offer: z\n  stratum: site\n"
        "estimators: [fixed_effects, weighted, interacted]\n", encoding="utf-8")
    _invoke("run", str(root / "spec.yaml"), "--out", str(root / "out"), "-q", "-f", "json",
            "-f", "md")
    return json.loads((root / "out" / "results.json").read_text(encoding="utf-8"))


@pytest.mark.parametrize("fe_above", [True, False])
def test_reading_follows_the_direction_of_the_gap(tmp_path, fe_above) -> None:
    doc = _design(tmp_path, fe_above=fe_above, weak=False, seed=3 if fe_above else 4)
    gap = doc["comparisons"][0]["gap"]
    # by construction: the effect peaks (or dips) where fixed effects weight most
    assert (gap["estimate"] > 0) == fe_above and gap["p_value"] < 0.05
    md = " ".join((tmp_path / "out" / "report.md").read_text(encoding="utf-8").split())
    word = "above" if fe_above else "below"
    assert f"lies {word} the LATE" in md and "differs beyond noise" in md
    assert ("lies below" if fe_above else "lies above") not in md
    assert "first stage is weak" not in md


def test_reading_flags_a_weak_first_stage_and_not_a_strong_one(tmp_path) -> None:
    doc = _design(tmp_path, fe_above=True, weak=True, seed=5)
    complier = next(e for e in doc["estimates"] if e["estimator"] == "interacted")
    # by construction: a first stage of 0.01 on 60 units per stratum is weak
    assert complier["weak_first_stage"]
    md = " ".join((tmp_path / "out" / "report.md").read_text(encoding="utf-8").split())
    assert "first stage is weak" in md and "weak-IV robust set" in md


def test_a_blinded_run_says_so_in_every_report(tmp_path) -> None:
    spec = tmp_path / "spec.yaml"
    spec.write_text(DEMO_SPEC.read_text(encoding="utf-8").replace(
        "../demo_data/", str(REPO / "demo_data") + "/"), encoding="utf-8")
    _invoke("run", str(spec), "--out", str(tmp_path / "out"), "-q", "--blind",
            "-f", "json", "-f", "html", "-f", "md", "-f", "tex")
    for name in ("report.html", "report.md", "report.tex"):
        text = (tmp_path / "out" / name).read_text(encoding="utf-8")
        # by construction: a blinded run's every output is labelled
        assert "BLINDED rehearsal (seed 1)" in text, name
        assert text.count("BLINDED") >= 3, name  # the banner and each table note


def test_the_weight_sentence_follows_the_weights(demo_results) -> None:
    from strativ.cli.report_words import weight_sentence
    from strativ.cli.results_read import results_from_document

    doc = json.loads(demo_results.read_text(encoding="utf-8"))
    for row in doc["strata"]:  # the complier weights put where fixed effects put theirs
        row["weight_fixed_effects"], row["weight_complier"] = \
            row["weight_complier"], row["weight_fixed_effects"]
    swapped = results_from_document(doc).outcomes[0]
    count, fe, cw = near_half_weights(swapped)
    # by construction: swapping the weights swaps the shares near one half
    assert fe < cw - 0.05
    assert f"hold {fe:.0%} of the fixed-effects weight, less than the {cw:.0%}" \
        in weight_sentence(swapped)
    assert "how close its offer share is to one half" not in weight_sentence(swapped)
