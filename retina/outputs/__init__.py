"""Outputs of a run: figures, key numbers and the report, written together by :func:`write_outputs`.

- :mod:`retina.outputs.figures` - every figure a :class:`~retina.results.Results` allows, drawn
  here or on worker processes while later stages run (:class:`OutputWriter`);
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

__all__ = ["write_outputs", "OutputWriter"]

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
    ``outdir`` as it was; a later run removes the stale staging folder.  The same as
    :class:`OutputWriter` opened after the run and finished at once.

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
    with OutputWriter(outdir, force=force, formats=formats, dpi=dpi, animation=animation, jobs=jobs) as w:
        return w.finish(res, title=title, progress_factory=progress_factory, save_results=save_results)


class OutputWriter:
    """The output folder of a run, opened before the run so that figures are drawn while it computes.

    Opening checks ``outdir`` (as :func:`write_outputs`) and makes the hidden staging folder; with
    ``jobs > 1`` a :class:`~retina.outputs.figures.FigurePool` then draws each figure as soon as
    :meth:`results_so_far` (pass it as ``on_group`` to :func:`retina.pipeline.run`) shows its
    group.  :meth:`finish` writes ``results.h5``, waits for the figures (redrawing any whose data
    changed), writes the report and publishes the folder in one rename.  Leaving the ``with``
    block without :meth:`finish` (an error, Ctrl-C) stops the workers and removes the staging
    folder, so ``outdir`` stays as it was.

    Parameters
    ----------
    outdir : str or Path
    force : bool
        Write into an existing, non-empty folder.
    formats, dpi, animation
        As in :func:`write_outputs`.
    jobs : int
        Processes drawing the figures; 1 draws them all in :meth:`finish`, in this process.

    Raises
    ------
    InputError
        When ``outdir`` is a file, is not empty without ``force``, or its parent is missing.
    """

    def __init__(self, outdir: str | Path, *, force: bool = False, formats=("png", "svg"), dpi: int = 300,
                 animation: bool = True, jobs: int = 1):
        from retina.io.atomic import check_folder_writable

        outdir = Path(outdir)
        if outdir.exists() and not outdir.is_dir():
            raise InputError("exists and is not a folder", source=outdir)
        if outdir.exists() and any(outdir.iterdir()) and not force:
            raise InputError("folder exists and is not empty; pass --force to overwrite it", source=outdir)
        if not outdir.parent.exists():
            raise InputError(f"folder {outdir.parent} does not exist", source=outdir)
        check_folder_writable(outdir.parent)
        self.outdir = outdir
        self.formats, self.dpi, self.animation = tuple(formats), int(dpi), bool(animation)
        self.jobs = max(1, int(jobs))
        self.stage: Path | None = None
        self.pool = None
        self._t0 = None

    def __enter__(self) -> "OutputWriter":
        from retina.io.atomic import clean_stale_folders, make_stage_folder

        clean_stale_folders(self.outdir)
        self.stage = make_stage_folder(self.outdir)
        if self.jobs > 1:
            self.pool = figures.FigurePool(self.stage / "figures", formats=self.formats, dpi=self.dpi,
                                           animation=self.animation, jobs=self.jobs)
        return self

    def __exit__(self, *exc) -> None:
        import shutil

        if self.pool is not None:
            if exc[0] is not None:
                self.pool.cancel()
            else:
                self.pool.close()
        if self.stage is not None:
            shutil.rmtree(self.stage, ignore_errors=True)
            self.stage = None
        return None

    def results_so_far(self, res: Results) -> None:
        """Hand out the figures of the groups computed so far (``on_group`` of :func:`retina.pipeline.run`).

        Parameters
        ----------
        res : Results
            Partial results; ignored when figures are drawn in this process (``jobs = 1``).
        """
        if self.pool is not None:
            if self._t0 is None:
                self._t0 = time.perf_counter()
            self.pool.submit(res)

    def finish(self, res: Results, *, title: str | None = None, progress_factory: ProgressFactory | None = None,
               save_results: bool = True) -> dict:
        """Write everything for the final results and publish the folder.

        Parameters
        ----------
        res : Results
        title : str, optional
            Report title (default from the scenario name).
        progress_factory : callable(description, total), optional
            Progress callbacks (one step per figure).
        save_results : bool
            Write ``results.h5`` (False when redrawing from the same file).

        Returns
        -------
        dict
            Paths: ``results``, ``html``, ``markdown``, ``figures``.
        """
        from retina.io.atomic import publish_folder
        from retina.outputs.report import write_report

        if self.stage is None:
            raise RuntimeError("OutputWriter.finish outside its with block")
        stage, outdir = self.stage, self.outdir
        pf = progress_factory or no_progress
        if self.pool is not None:
            self.pool.submit(res)               # start what is not drawn yet before saving the file
        if save_results:
            _save(res, stage / "results.h5", force=True)
        t0 = time.perf_counter()
        if self.pool is not None:
            entries = self.pool.collect(res, progress=pf("figures", 10))
            _log.info("figures: %.1f s on %d process(es) after the stages (drawing began %.1f s before)",
                      time.perf_counter() - t0, self.jobs, t0 - (self._t0 if self._t0 is not None else t0))
        else:
            entries = figures.make_figures(res, stage / "figures", formats=self.formats, dpi=self.dpi,
                                           animation=self.animation, progress=pf("figures", 10), jobs=1)
            _log.info("figures: %.1f s on 1 process(es)", time.perf_counter() - t0)
        name = res.provenance.get("scenario_name", "scenario")
        write_report(
            stage, title or f"retina-compass report: {name}", key_numbers(res), entries,
            intro=f"Scenario '{name}', seed {res.provenance.get('seed')}. Results in results.h5.",
            scenario_text=res.provenance.get("scenario_toml", ""),
            provenance={k: v for k, v in res.provenance.items() if k not in ("scenario_toml", "yield_provenance")},
            force=True)
        publish_folder(stage, outdir)
        self.stage = None
        _log.info("wrote %s (results.h5, figures/, index.html, report.md)", outdir)
        return {"results": outdir / "results.h5", "html": outdir / "index.html", "markdown": outdir / "report.md",
                "figures": outdir / "figures"}
