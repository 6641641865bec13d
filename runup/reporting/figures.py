"""The figures of a report: which plots, drawn by :mod:`runup.plots`, with their captions.

Bode plots one per speed segment and X–Y plane, polar plots one per probe that shows a
critical, and with a prediction the measured-against-predicted plot and the critical speed
map.  Every number drawn comes from the result objects held in :class:`ReportInputs`.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

from matplotlib.figure import Figure

from .. import plots
from ..compare import Agreement
from ..critical import Identification
from ..io.predicted import CriticalSpeedMap
from ..run import OperatingSpeeds
from ..stiffness import observed_from_agreement
from .inputs import Progress, ReportInputs, margin_bands_rpm

__all__ = ["ReportFigure", "plane_groups", "report_figures", "comparison_plot", "speed_map_plot"]


@dataclass(frozen=True)
class ReportFigure:
    """One figure of a report: a file-name-safe key, a title, a caption and the figure."""

    key: str
    title: str
    caption: str
    figure: Figure


#: Group name of the probes that have no plane in the metadata.
NO_PLANE = "(no plane)"


def plane_groups(identification: Identification, *, segment: int = 0, order: int = 1) -> list[tuple[str, list[str]]]:
    """Probes of one segment and order grouped by measurement plane, in the data's order.

    The plane is the sidecar's ``plane`` of each probe; probes without one form one group,
    ``"(no plane)"``.
    """
    planes = {p.name: p.plane for p in identification.conditioned.metadata.probes}
    groups: dict[str, list[str]] = {}
    for c in identification.conditioned.curves:
        if c.segment == segment and c.order == order:
            groups.setdefault(planes.get(c.probe) or NO_PLANE, []).append(c.probe)
    return list(groups.items())


def _key(*parts: object) -> str:
    return "-".join(re.sub(r"[^A-Za-z0-9]+", "_", str(p)).strip("_") for p in parts)


def report_figures(inputs: ReportInputs, *, progress: Progress | None = None) -> tuple[ReportFigure, ...]:
    """Draw every figure of the report (see the module notes)."""
    step = progress or (lambda _text: None)
    ident = inputs.identification
    cond = ident.conditioned
    predicted_rpm = [m.speed_rpm for m in inputs.predicted.modes] if inputs.predicted is not None else []
    out: list[ReportFigure] = []
    for seg in cond.segments:
        bands = margin_bands_rpm(inputs.check, segment=seg.index) if inputs.check is not None else ()
        for plane, probes in plane_groups(ident, segment=seg.index):
            step(f"Bode plot, {seg.label}, plane {plane}")
            bode = plots.bode(ident, probes=probes, segment=seg.index, margin_bands=bands,
                              predicted_speeds_rpm=predicted_rpm)
            extra = []
            if bands:
                extra.append(f"hatched: separation margin required by {inputs.check.rule_set}")
            if predicted_rpm:
                extra.append("dash-dot: predicted criticals")
            where = f"probes {', '.join(probes)}" if plane == NO_PLANE else f"plane {plane} ({', '.join(probes)})"
            caption = (f"Bode plot, {seg.label}, {where}: 1X amplitude (µm pk-pk) "
                       "and phase lag (deg) against speed (rpm); grey: operating range"
                       + ("; " + "; ".join(extra) if extra else "") + ".")
            out.append(ReportFigure(_key("bode", seg.index, plane), f"Bode — {seg.label} — {where}", caption,
                                    bode.figure))
        shown = {p for c in ident.criticals if c.segment == seg.index and c.order == 1 for p in c.probes}
        for curve in (c for c in cond.curves if c.segment == seg.index and c.order == 1 and c.probe in shown):
            step(f"polar plot, {seg.label}, {curve.probe}")
            pol = plots.polar(ident, probe=curve.probe, segment=seg.index)
            caption = (f"Polar plot, {seg.label}, probe {curve.probe}: compensated 1X vector (µm pk-pk), phase lag "
                       "0° right growing clockwise, speed (rpm) along the curve; dashed: circle fit.")
            out.append(ReportFigure(_key("polar", seg.index, curve.probe), f"Polar — {seg.label} — {curve.probe}",
                                    caption, pol.figure))
    agreement, predicted = inputs.agreement, inputs.predicted
    if agreement is not None and predicted is not None:
        step("measured against predicted")
        out.append(ReportFigure("comparison", "Measured against predicted critical speeds",
                                f"Peak-response speeds (rpm), measured against predicted, ±{agreement.tolerance_percent:g} % "
                                "band; open markers lie outside it.", comparison_plot(agreement).figure))
        if predicted.critical_speed_map is not None:
            step("critical speed map")
            csm = speed_map_plot(agreement, predicted.critical_speed_map, cond.metadata.operating)
            out.append(ReportFigure("critical_speed_map", "Undamped critical speed map",
                                    "Predicted undamped critical speeds (rpm) against support stiffness ratio; dashed: "
                                    "measured natural speeds of the matched modes; grey: operating range.", csm.figure))
    return tuple(out)


def comparison_plot(agreement: Agreement) -> plots.ComparisonPlot:
    """Measured against predicted speeds of an agreement; unmatched predicted modes as ``nan``."""
    measured = [m.measured.speed_rpm for m in agreement.matches] + [math.nan] * len(agreement.unmatched_predicted)
    pred = [m.predicted.speed_rpm for m in agreement.matches] + [u.mode.speed_rpm for u in agreement.unmatched_predicted]
    labels = [m.predicted.mode for m in agreement.matches] + [u.mode.mode for u in agreement.unmatched_predicted]
    return plots.comparison(measured, pred, labels=labels, tolerance_percent=agreement.tolerance_percent)


def speed_map_plot(
    agreement: Agreement, speed_map: CriticalSpeedMap, operating: OperatingSpeeds
) -> plots.CriticalSpeedMapPlot:
    """The predicted map with the measured natural speeds of the matched modes it maps."""
    observed = observed_from_agreement(agreement, speed_map)
    return plots.critical_speed_map(
        speed_map.stiffness_ratio, {m: speed_map.curve(m) for m in speed_map.modes},
        measured_speeds_rpm=[o.speed_rpm for o in observed], operating=operating,
    )
