"""Outputs of a run: figures, key numbers and the report, written together by :func:`write_outputs`.

- :mod:`retina.outputs.figures` - every figure a :class:`~retina.results.Results` allows;
- :mod:`retina.outputs.text` - the key-number tables and the command line's summary;
- :mod:`retina.outputs.report` - the HTML and Markdown report pages.
"""

from __future__ import annotations

import logging
import time
from pathlib import Path

from retina.build import ProgressFactory, no_progress
from retina.errors import InputError
from retina.outputs import figures
from retina.outputs.text import key_numbers
from retina.results import Results, save_results as _save

__all__ = ["write_outputs"]

_log = logging.getLogger(__name__)


def write_outputs(res: Results, outdir: str | Path, *, force: bool = False, formats=("png", "svg"),
                  dpi: int = 300, animation: bool = True, title: str | None = None,
                  progress_factory: ProgressFactory | None = None, save_results: bool = True,
                  jobs: int = 1) -> dict:
    """Write ``results.h5``, ``figures/`` and the report (``index.html``, ``report.md``) into ``outdir``.

    ``outdir`` must not exist or be empty, unless ``force`` (then files of the same names are
    replaced and other files are kept).  Everything is first written into a hidden staging folder
    beside ``outdir`` and published in one rename when complete
    (:func:`retina.io.atomic.publish_folder`), so an interrupted, failed or killed run leaves
    ``outdir`` as it was; a later run removes the stale staging folder.

    Parameters
    ----------
    res : Results
    outdir : str or Path
    force : bool
        Write into an existing, non-empty folder.
    formats : sequence of str
        Figure formats among "png", "svg", "pdf".
    dpi : int
        PNG resolution.
    animation : bool
        Also write the head-scan GIF (when the results hold a scan).
    title : str, optional
        Report title (default from the scenario name).
    progress_factory : callable(description, total), optional
        Progress callbacks (one step per figure).
    save_results : bool
        Write ``results.h5`` (False when redrawing from the same file).
    jobs : int
        Processes drawing the figures (:func:`retina.outputs.figures.make_figures`); 1 draws them
        in this process.

    Returns
    -------
    dict
        Paths: ``results``, ``html``, ``markdown``, ``figures``.

    Raises
    ------
    InputError
        When ``outdir`` is a file, is not empty without ``force``, or its parent is missing.
    """
    import shutil

    from retina.io.atomic import check_folder_writable, clean_stale_folders, make_stage_folder, publish_folder
    from retina.outputs.report import write_report

    outdir = Path(outdir)
    if outdir.exists() and not outdir.is_dir():
        raise InputError("exists and is not a folder", source=outdir)
    if outdir.exists() and any(outdir.iterdir()) and not force:
        raise InputError("folder exists and is not empty; pass --force to overwrite it", source=outdir)
    if not outdir.parent.exists():
        raise InputError(f"folder {outdir.parent} does not exist", source=outdir)
    check_folder_writable(outdir.parent)
    clean_stale_folders(outdir)
    pf = progress_factory or no_progress
    stage = make_stage_folder(outdir)
    try:
        if save_results:
            _save(res, stage / "results.h5", force=True)
        t0 = time.perf_counter()
        entries = figures.make_figures(res, stage / "figures", formats=formats, dpi=dpi, animation=animation,
                                       progress=pf("figures", 10), jobs=jobs)
        _log.info("figures: %.1f s on %d process(es)", time.perf_counter() - t0, jobs)
        name = res.provenance.get("scenario_name", "scenario")
        write_report(
            stage, title or f"retina-compass report: {name}", key_numbers(res), entries,
            intro=f"Scenario '{name}', seed {res.provenance.get('seed')}. Results in results.h5.",
            scenario_text=res.provenance.get("scenario_toml", ""),
            provenance={k: v for k, v in res.provenance.items() if k not in ("scenario_toml", "yield_provenance")},
            force=True)
        publish_folder(stage, outdir)
    finally:
        shutil.rmtree(stage, ignore_errors=True)
    _log.info("wrote %s (results.h5, figures/, index.html, report.md)", outdir)
    return {"results": outdir / "results.h5", "html": outdir / "index.html", "markdown": outdir / "report.md",
            "figures": outdir / "figures"}
