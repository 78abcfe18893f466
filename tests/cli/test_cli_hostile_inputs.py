"""A catalogue of hostile inputs: each case has its exact exit code and a message naming the
problem; no case shows a traceback, leaves result files after a failure, or changes an input.

`CASES` is read by `tests/catalogue_count.py`. Each case builds its files in a fresh folder
from the same small study and returns the command line to run.
"""

from __future__ import annotations

import gzip
import hashlib
import os
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import pytest
from cli_support import ENV
from typer.testing import CliRunner

from strativ.cli.app import app

COLUMNS = "columns: {outcome: y, take_up: d, offer: z, stratum: s}\n"
SPEC = "data: data.csv\n" + COLUMNS


def study_csv(rows: int = 80, label: Callable[[int], str] = lambda i: f"s{i % 4}",
              y: Callable[[int], str] = lambda i: f"{(i * 7) % 11 / 4 + (i % 3):.2f}",
              extra: str = "") -> str:
    """A small deterministic study: four strata, offer in alternating blocks of four."""
    lines = ["s,z,d,y" + ("," + extra.split("=")[0] if extra else "")]
    for i in range(rows):
        z = (i // 4) % 2
        d = int(z == 1 and i % 5 != 4) or int(z == 0 and i % 9 == 0)
        cells = [label(i), str(z), str(d), y(i)]
        if extra:
            cells.append(extra.split("=", 1)[1])
        lines.append(",".join(cells))
    return "\n".join(lines) + "\n"


def _files(root: Path, spec: str = SPEC, data: str | bytes | None = None,
           name: str = "data.csv") -> None:
    (root / "spec.yaml").write_text(spec, encoding="utf-8")
    payload = study_csv() if data is None else data
    target = root / name
    if isinstance(payload, bytes):
        target.write_bytes(payload)
    else:
        target.write_text(payload, encoding="utf-8")


def run(*extra: str) -> list[str]:
    return ["run", "spec.yaml", "--out", "out", *extra]


def check(*extra: str) -> list[str]:
    return ["check", "spec.yaml", *extra]


@dataclass(frozen=True)
class Case:
    """One hostile input: how to make it, the command, the exit code and message expected."""

    name: str
    make: Callable[[Path], list[str]]
    code: int
    says: str


def _fifo(root: Path, name: str) -> None:
    os.mkfifo(root / name)


def _spec_fifo(root: Path) -> list[str]:
    _files(root)
    (root / "spec.yaml").unlink()
    _fifo(root, "spec.yaml")
    return check()


def _data_fifo(root: Path) -> list[str]:
    (root / "spec.yaml").write_text("data: pipe.csv\n" + COLUMNS, encoding="utf-8")
    _fifo(root, "pipe.csv")
    return check()


def _data_device(root: Path) -> list[str]:
    (root / "spec.yaml").write_text("data: zero.csv\n" + COLUMNS, encoding="utf-8")
    (root / "zero.csv").symlink_to("/dev/zero")
    return run()


def _glob_fifo(root: Path) -> list[str]:
    _files(root, spec="data: '*.csv'\n" + COLUMNS)
    _fifo(root, "late.csv")
    return check()


def _spec(text: str | bytes, data: str | bytes | None = None, name: str = "data.csv",
          command: Callable[..., list[str]] = run) -> Callable[[Path], list[str]]:
    def make(root: Path) -> list[str]:
        _files(root, data=data, name=name)
        if isinstance(text, bytes):
            (root / "spec.yaml").write_bytes(text)
        else:
            (root / "spec.yaml").write_text(text, encoding="utf-8")
        return command()
    return make


def _data(data: str | bytes, command: Callable[..., list[str]] = run,
          spec: str = SPEC) -> Callable[[Path], list[str]]:
    def make(root: Path) -> list[str]:
        _files(root, spec=spec, data=data)
        return command()
    return make


def _bomb() -> str:
    text = "a: &a [1, 1, 1, 1, 1, 1, 1, 1, 1]\n"
    for prev, name in zip("abcdefgh", "bcdefghi", strict=True):
        text += f"{name}: &{name} [" + ", ".join([f"*{prev}"] * 9) + "]\n"
    return SPEC + text + "title: *i\n"


def _nul_late() -> bytes:
    text = study_csv(rows=8000).encode()
    at = text.index(b"\n", 70000) + 1
    return text[:at] + b"s\x001" + text[at + 2:]


def _output_is_file(root: Path) -> list[str]:
    _files(root)
    (root / "out").write_text("not a folder", encoding="utf-8")
    return run()


def _output_below_file(root: Path) -> list[str]:
    _files(root, spec=SPEC + "output: {dir: blocker/out}\n")
    (root / "blocker").write_text("a file", encoding="utf-8")
    return check()


def _into_data_folder(root: Path) -> list[str]:
    (root / "data").mkdir()
    (root / "data" / "wave_1.csv").write_text(study_csv(), encoding="utf-8")
    (root / "spec.yaml").write_text("data: data/*.csv\n" + COLUMNS
                                    + "output: {dir: data}\n", encoding="utf-8")
    return ["run", "spec.yaml"]


def _into_data_subfolder(root: Path) -> list[str]:
    (root / "data").mkdir()
    (root / "data" / "wave_1.csv").write_text(study_csv(), encoding="utf-8")
    (root / "spec.yaml").write_text("data: data/**/*.csv\n" + COLUMNS
                                    + "output: {dir: data/results}\n", encoding="utf-8")
    return ["run", "spec.yaml"]


def _through_link(root: Path) -> list[str]:
    (root / "data").mkdir()
    (root / "data" / "wave_1.csv").write_text(study_csv(), encoding="utf-8")
    (root / "link").symlink_to(root / "data")
    (root / "spec.yaml").write_text("data: link/*.csv\n" + COLUMNS
                                    + "output: {dir: data}\n", encoding="utf-8")
    return ["run", "spec.yaml"]


def _star_default_folder(root: Path) -> list[str]:
    _files(root, spec="data: '*.csv'\n" + COLUMNS)
    return ["run", "spec.yaml", "-q"]


def _same_bytes_twice(root: Path) -> list[str]:
    _files(root, spec="data: [a.csv, b.csv]\n" + COLUMNS, name="a.csv")
    (root / "b.csv").write_bytes((root / "a.csv").read_bytes())
    return run()


def _results_fifo(root: Path) -> list[str]:
    _fifo(root, "results.json")
    return ["report", "results.json"]


def _compare_fifo(root: Path) -> list[str]:
    _fifo(root, "old.json")
    (root / "new.json").write_text("{}", encoding="utf-8")
    return ["compare", "old.json", "new.json"]


def _report_of(text: str) -> Callable[[Path], list[str]]:
    def make(root: Path) -> list[str]:
        (root / "results.json").write_text(text, encoding="utf-8")
        return ["report", "results.json"]
    return make


def _label(label: Callable[[int], str], extra: str = "") -> Callable[[Path], list[str]]:
    return _data(study_csv(label=label, extra=extra))


ESC = "\x1b]0;owned\x07\x1b[2J"
CASES: tuple[Case, ...] = (
    # files that are not regular files: refused before they are opened
    Case("spec is a named pipe", _spec_fifo, 2, "not a regular file but a named pipe"),
    Case("data is a named pipe", _data_fifo, 2, "'pipe.csv' is not a regular file"),
    Case("data links to a device", _data_device, 2, "'zero.csv' is not a regular file but "
         "a device"),
    Case("glob matches a named pipe", _glob_fifo, 2, "'late.csv' is not a regular file"),
    Case("spec missing", lambda r: ["check", "absent.yaml"], 2, "does not exist"),
    Case("data missing", _spec("data: gone.csv\n" + COLUMNS), 2, "does not exist"),
    Case("data is a folder", lambda r: (r.joinpath("d.csv").mkdir(),
                                        _spec("data: d.csv\n" + COLUMNS)(r))[1], 2,
         "is a directory"),
    Case("glob matches nothing", _spec("data: 'none_*.csv'\n" + COLUMNS), 2,
         "matches no file"),
    # the spec's YAML
    Case("alias bomb", _spec(_bomb()), 2, "repeats a list or mapping through an alias"),
    Case("deep nesting", _spec("data: " + "[" * 20000 + "]" * 20000 + "\n"), 2,
         "nested too deeply"),
    Case("control character", _spec(SPEC + "title: \"a\x1bb\"\n"), 2,
         "character YAML does not allow (0x1b"),
    Case("not UTF-8", _spec(SPEC.encode() + b"title: caf\xe9\n"), 2, "not UTF-8 text"),
    Case("empty spec", _spec(""), 2, "the spec is empty"),
    Case("spec is a list", _spec("- data.csv\n"), 2, "must be a mapping"),
    Case("two documents", _spec(SPEC + "---\ntitle: x\n"), 2, "single YAML document"),
    Case("tab indent", _spec("data: data.csv\ncolumns:\n\toutcome: y\n"), 2, "tab"),
    Case("unknown key", _spec(SPEC + "estimatorz: [fixed_effects]\n"), 2, "unknown key"),
    Case("duplicate key", _spec(SPEC + "data: other.csv\n"), 2, "appears twice"),
    Case("huge value is cut", _spec(SPEC + "estimators: " + "x" * 500_000 + "\n"), 2,
         "more characters)"),
    Case("escape in a column name", _spec("data: data.csv\ncolumns: {outcome: \"y"
                                          + ESC.replace("\x1b", "\\e").replace("\x07", "\\a")
                                          + "\", take_up: d, offer: z, stratum: s}\n"), 3,
         "\\x1b]0;owned\\x07\\x1b[2J"),
    Case("unknown format", lambda r: (_files(r), run("--format", "json,pdf"))[1], 2,
         "unknown format 'pdf'"),
    Case("unknown gate", lambda r: (_files(r), run("--fail-on", "sunny"))[1], 2, "sunny"),
    # data bytes
    Case("NUL past the binary sniff", _data(_nul_late()), 3, "a NUL byte (\\x00) at line"),
    Case("NUL at the start", _data(b"s,z,d,y\n\x00\x01\x02\n"), 3,
         "not text (it holds binary data: a NUL byte on line 2)"),
    Case("Latin-1 text", _data(study_csv().encode() + b"s1,1,1,caf\xe9\n"), 3, "not UTF-8"),
    Case("UTF-16 text", _data(study_csv().encode("utf-16")), 3, "UTF-16"),
    Case("gzip named .csv", _data(gzip.compress(study_csv().encode())), 3,
         "gzip-compressed"),
    Case("Parquet named .csv", _data(b"PAR1" + b"\x00" * 64), 3, "Parquet data"),
    Case("empty file", _data(b""), 3, "empty"),
    Case("header only", _data("s,z,d,y\n"), 3, "no data rows"),
    Case("blank lines only", _data("\n\n\n"), 3, "the file is empty"),
    Case("missing column", _data(study_csv().replace("s,z,d,y", "s,z,d,w", 1)), 3,
         "no column 'y'"),
    Case("repeated column", _data(study_csv(extra="y=1")), 3, "columns named 'y'"),
    Case("offer coded 2", _data(study_csv().replace("\ns1,1,", "\ns1,2,", 1)), 3,
         "0/1 or true/false"),
    Case("take-up as words", _data(study_csv().replace("\ns1,1,1,", "\ns1,1,yes,", 1)), 3,
         "0/1 or true/false"),
    Case("semicolons", _data(study_csv().replace(",", ";")), 3, "separated by semicolons"),
    Case("ragged line", _data(study_csv() + "s1,1,1,2.0,9\n"), 3, "fields but the header"),
    Case("missing offer", _data(study_csv().replace("\ns1,1,", "\ns1,,", 1)), 3,
         "missing value"),
    Case("overflowing outcome", _data(study_csv(y=lambda i: "1e300" if i == 3 else "1.0")), 3,
         "overflow"),
    Case("thousands separators", _data(study_csv(y=lambda i: f"\"{1000 + i:,}.000\"")), 3,
         "thousands separators"),
    Case("decimal commas", _data(study_csv(y=lambda i: f"\"{i},5\"")), 3, "decimal comma"),
    Case("same bytes under two names", _same_bytes_twice, 3, "the same content as a.csv"),
    Case("outcome never filled", _data(study_csv(y=lambda i: "")), 3,
         "the outcome has no value in any of the 80 kept rows"),
    Case("outcome never filled, check", _data(study_csv(y=lambda i: ""), command=check), 3,
         "the outcome has no value"),
    Case("corrupt Parquet", _spec("data: data.parquet\n" + COLUMNS, b"PAR1garbagePAR1",
                                  "data.parquet"), 3, "data.parquet"),
    Case("corrupt Excel", _spec("data: data.xlsx\n" + COLUMNS, b"PK\x03\x04garbage",
                                "data.xlsx"), 3, "data.xlsx"),
    Case("one offer arm everywhere", _data(study_csv().replace(",0,", ",1,")), 3,
         "no stratum has both offered and not-offered units"),
    # inputs that must pass, safely
    Case("long free-text field", _data(study_csv(extra="note=x").replace(
        ",x\n", "," + "a" * 3_000_000 + "\n", 1)), 0, "wrote"),
    Case("CRLF line ends", _data(study_csv().replace("\n", "\r\n")), 0, "wrote"),
    Case("byte-order mark", _data("\ufeff" + study_csv()), 0, "wrote"),
    Case("escapes in a stratum label", _label(lambda i: f"s{i % 4}{ESC}"), 0, "wrote"),
    Case("bidi override in a label", _label(lambda i: f"s{i % 4}\u202e"), 0, "wrote"),
    Case("formula as a label", _label(lambda i: f"=HYPERLINK(\"x\";s{i % 4})"), 0, "wrote"),
    Case("star glob, default folder", _star_default_folder, 0, ""),
    # where results would land
    Case("output folder is a file", _output_is_file, 2, "is a file"),
    Case("output below a file", _output_below_file, 2, "cannot be created"),
    Case("output into the data glob", _into_data_folder, 2, "would match the data pattern"),
    Case("output below a ** glob", _into_data_subfolder, 2, "would match the data pattern"),
    Case("output through a linked folder", _through_link, 2, "would match the data pattern"),
    # result files given to report and compare
    Case("results are a named pipe", _results_fifo, 2, "not a regular file but a named pipe"),
    Case("compare a named pipe", _compare_fifo, 2, "not a regular file"),
    Case("report of another JSON", _report_of('{"a": 1}'), 2, "does not follow the results"),
    Case("report of garbage", _report_of("{not json"), 2, "not a JSON results file"),
)


def _snapshot(root: Path) -> dict[str, tuple[str, float]]:
    out = {}
    for path in sorted(root.rglob("*")):
        if path.is_symlink() or not path.is_file() or "out" in path.relative_to(root).parts \
                or "strativ_out" in path.parts:
            continue
        out[str(path.relative_to(root))] = (hashlib.sha256(path.read_bytes()).hexdigest(),
                                            path.stat().st_mtime)
    return out


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_hostile_input(case: Case, tmp_path: Path, monkeypatch) -> None:
    monkeypatch.chdir(tmp_path)
    args = case.make(tmp_path)
    before = _snapshot(tmp_path)
    result = CliRunner().invoke(app, args, env=ENV)
    output = result.stdout + result.stderr
    assert result.exit_code == case.code, (result.exit_code, output[-3000:])
    assert isinstance(result.exception, (SystemExit, type(None))), repr(result.exception)
    assert "Traceback" not in output
    assert case.says in " ".join(output.split()), output[-3000:]
    assert "\x1b" not in output and "\u202e" not in output  # nothing acts on the terminal
    assert len(result.stderr) < 4000
    assert _snapshot(tmp_path) == before  # inputs untouched
    if case.code != 0:
        for folder in (tmp_path / "out", tmp_path / "strativ_out"):
            assert not folder.is_dir() or not any(folder.iterdir()), sorted(folder.iterdir())
    if case.name == "formula as a label":
        text = (tmp_path / "out" / "strata.csv").read_text(encoding="utf-8")
        assert "'=HYPERLINK" in text and "\n=HYPERLINK" not in text and ",=HYPERLINK" not in text
