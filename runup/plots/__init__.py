"""Plots of run-up results: Bode, polar, measured-versus-predicted, critical speed map, trend.

The only package of runup that imports matplotlib (one module per kind of plot:
:mod:`.bode`, :mod:`.polar`, :mod:`.compare`, :mod:`.trend`, :mod:`.save`; shared look in
:mod:`._style`, what is taken from the results in :mod:`._data`).  It builds figures with
:class:`matplotlib.figure.Figure` directly (no ``pyplot`` state, no backend switch), so it
is safe in scripts, servers and notebooks alike.  Every function is a leaf: it takes
results, draws them on the axes given (or on a new figure) and returns a frozen record of
what it drew, so that tests and callers can check lines, markers and labels without
looking at pixels.  Nothing is computed here beyond evaluating the fitted models that the
results already hold.

Conventions (see ``docs/plots.md``): speed in rpm, 1X amplitude in micrometres
peak-to-peak, phase as lag in degrees (:mod:`runup.units`).  On the polar plot the
complex vector ``X = A exp(-j phi)`` is drawn in the ordinary complex plane, so a lag of
0 deg points right and the lag grows clockwise.

Styling: each probe keeps one colour and one marker throughout (the markers make the
probes distinguishable in grayscale print); the line style says what a line is
(solid: slow-roll compensated data, dotted: uncompensated, dashed: fitted model,
dash-dot: predicted critical).  Colours are Paul Tol's "high-contrast" and "bright"
schemes (Tol, *Colour Schemes*, SRON/EPS/TN/09-002, 2021), chosen to survive grayscale.
"""

from .bode import BodePlot, bode
from .compare import ComparisonPlot, CriticalSpeedMapPlot, comparison, critical_speed_map
from .polar import PolarPlot, polar
from .save import SAVE_FORMATS, save_figure
from .trend import TrendPlot, trend

__all__ = [
    "BodePlot",
    "PolarPlot",
    "ComparisonPlot",
    "CriticalSpeedMapPlot",
    "TrendPlot",
    "bode",
    "polar",
    "comparison",
    "critical_speed_map",
    "trend",
    "save_figure",
    "SAVE_FORMATS",
]
