"""report.html: one self-contained page on a measured sunset and the inferred lapse rate.

The page is rendered from ``template.html`` with Jinja2, autoescape on, so every string
that came from the user's files (site name, file names, TOML values, notes) is escaped.
Figures (:mod:`analyse.report.figures`) are embedded as base64 PNG ``data:`` URIs; the
page asks for nothing from outside (no scripts, fonts or style sheets), so it reads the
same offline and prints.

The words of the summary and the table rows are built in :mod:`analyse.report._words`,
the figures' data and captions in :mod:`analyse.report._panels`.
"""

from __future__ import annotations

import importlib.resources
from pathlib import Path

from analyse.infer import DUCTING_K_PER_KM, MIRAGE_K_PER_KM
from analyse.report._panels import _figures, _reference
from analyse.report._words import (
    _assumptions,
    _constraint,
    _flag_counts,
    _key_numbers,
    _observation_rows,
    _summary,
    _title,
)

__all__ = ["render_report", "write_report_html"]


def write_report_html(path, measurement, inference, obs, *, curves=None) -> None:
    """Write report.html for a measured sunset.

    Parameters
    ----------
    path : str or Path
        File to write (UTF-8).
    measurement : analyse.pipeline.Measurement
    inference : analyse.infer.Inference
    obs : analyse.observation.Observation
    curves : analyse.infer.ModelCurves, optional
        The best model on the recording's time axis (:func:`analyse.infer.model_curves`);
        without it the figures show the measurements only.
    """
    Path(path).write_text(render_report(measurement, inference, obs, curves=curves),
                          encoding="utf-8")


def render_report(measurement, inference, obs, *, curves=None) -> str:
    """The page as a string (see :func:`write_report_html`)."""
    import jinja2

    text = importlib.resources.files(__package__).joinpath("template.html").read_text("utf-8")
    env = jinja2.Environment(autoescape=True, undefined=jinja2.StrictUndefined,
                             trim_blocks=True, lstrip_blocks=True)
    ref = _reference(measurement)
    return env.from_string(text).render(
        title=_title(measurement, obs), summary=_summary(measurement, inference, obs),
        key_numbers=_key_numbers(measurement, inference),
        constraint=_constraint(inference), figures=_figures(measurement, inference, obs,
                                                            curves, ref),
        observation=_observation_rows(measurement, inference, obs),
        assumptions=_assumptions(inference), flags=_flag_counts(measurement.table),
        ducting=f"{DUCTING_K_PER_KM:g}", mirage=f"{MIRAGE_K_PER_KM:+g}",
        notes=_notes(measurement, inference), layer_top_m=f"{obs.model.layer_top_m:g}",
        status=inference.status, version=_version())


def _notes(m, inf) -> list[str]:
    from analyse._offline import offline_notes

    return list(dict.fromkeys([*m.notes, *inf.notes, *offline_notes()]))


def _version() -> str:
    from importlib.metadata import PackageNotFoundError, version

    from analyse.results import MODEL_VERSION

    try:
        v = version("limbtrace")
    except PackageNotFoundError:
        v = "(version unknown)"
    return f"limbtrace {v}; {MODEL_VERSION}"
