"""`strativ report`: read a results file and write the reports (and figures) beside it."""

from __future__ import annotations

from pathlib import Path

from .errors import UsageError
from .files import atomic_write_bytes, remove_stale_temporaries

__all__ = ["write_reports"]


def write_reports(results: Path, formats: tuple[str, ...], *, out: Path | None = None,
                  figures: str | None = None) -> list[Path]:
    """Write the reports of a results file, each atomically.

    Parameters
    ----------
    results : Path
        A results.json, or the folder holding one.
    formats : tuple of str
        Report formats (`report.REPORT_FORMATS`).
    out : Path, optional
        Folder for the reports; default the folder of `results`.
    figures : {"svg", "png"}, optional
        Also write each figure as a separate file of this format.

    Returns
    -------
    list of Path
        The files written.

    Raises
    ------
    UsageError
        When the results file cannot be read or does not follow the results layout, or the
        folder cannot be written.
    """
    from .report import REPORT_FILES, figure_files, report_texts
    from .results_read import read_results

    path = results / "results.json" if results.is_dir() else results
    loaded = read_results(path)
    folder = (out or path.parent).expanduser()
    payloads = {REPORT_FILES[fmt]: text.encode("utf-8")
                for fmt, text in report_texts(loaded, formats).items()}
    if figures:
        payloads.update(figure_files(loaded, figures))
    written = []
    try:
        folder.mkdir(parents=True, exist_ok=True)
        remove_stale_temporaries(folder)
        for name, payload in payloads.items():
            target = folder / name
            atomic_write_bytes(target, payload)
            written.append(target)
    except OSError as exc:
        raise UsageError(f"cannot write the reports into {folder} ({exc.strerror or exc})",
                         "choose a writable folder with --out") from None
    return written
