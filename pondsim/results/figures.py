"""Figures (PNG) for the command line and the report, in one style
(:mod:`pondsim.results.figstyle`): the site, study and strain in every title, units on
every axis, amounts from zero, the caution mark in the footer, one Okabe & Ito colour per
policy across every figure, legends off the data.

One module per command family: ``figures_weather`` (``weather``, the forcing figure of
``run``), ``figures_policies`` (``run``, ``compare``), ``figures_outlook`` (``outlook``,
the report's drivers and sensitivity). This module gathers them.
"""

from __future__ import annotations

from pathlib import Path

from pondsim.glossary import CAUTION
from pondsim.results import figstyle as fs
from pondsim.results.figstyle import COLORS
from pondsim.results.figures_outlook import drivers_figure, outlook_figures
from pondsim.results.figures_policies import compare_figures, run_figures
from pondsim.results.figures_weather import FLUX_LABELS, weather_figure


def _save(fig, path) -> Path:
    """Save a figure not built by :func:`figstyle.new_figure`: reserve the footer strip
    (constrained layout) and add the caution mark there."""
    height = fig.get_size_inches()[1]
    bottom = fs.FOOTER_IN / height
    engine = fig.get_layout_engine()
    if engine is not None and "rect" in engine.get():
        engine.set(rect=(0.0, bottom, 1.0, 1.0 - bottom))
    fig.text(0.006, 0.5 * bottom, fs.CAUTION_MARK, fontsize=fs.FOOTER_PT, color="0.25",
             ha="left", va="center", gid="caution")
    return fs.save(fig, path)


__all__ = ["CAUTION", "COLORS", "FLUX_LABELS", "compare_figures", "drivers_figure",
           "outlook_figures", "run_figures", "weather_figure"]
