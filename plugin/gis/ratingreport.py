"""The fitrating report: the rating chart (records, fitted curve, ladder levels), residual charts and
the tables, built with the shared report builder (gis/report.py) and chart style (gis/charts.py)."""

from __future__ import annotations

import numpy as np

from ..core import rating as rt
from . import charts
from .report import Report

RECORD_COLOUR = "#1F4E8C"
CURVE_COLOUR = "#8E4A1C"
LEVEL_COLOUR = "#2a9d8f"


def rating_figure(fit: rt.RatingFit, lev: dict):
    """Stage against discharge: records, the fitted rating over the records and the ladder, and
    the ladder levels (filled within the records, open where extrapolated)."""
    fig, ax = charts.new_figure(9.0, 4.6)
    unit = fit.unit
    rec = fit.records
    q_lad = lev["q_mld"] if unit == "ML/d" else lev["q_m3s"]
    qmax = max(float(rec.discharge.max()), float(np.max(q_lad)) if len(q_lad) else 0.0)
    hmax = float(fit.stage_at(qmax))
    hh = np.linspace(fit.h0, hmax, 400)
    ax.plot(fit.discharge_at(hh), hh, color=CURVE_COLOUR, linewidth=1.6,
            label=f"rating Q = {fit.c:.4g} (h - {fit.h0:.3f})^{fit.b:.3f}")
    ax.scatter(rec.discharge, rec.stage, s=14, color=RECORD_COLOUR, alpha=0.75, linewidths=0,
               label=f"records (n = {fit.n})", zorder=3)
    inside = np.asarray(lev["within_records"], dtype=bool)
    if inside.any():
        ax.scatter(q_lad[inside], lev["stage_m"][inside], marker="D", s=28, color=LEVEL_COLOUR, zorder=4,
                   label="ladder levels")
    if (~inside).any():
        ax.scatter(q_lad[~inside], lev["stage_m"][~inside], marker="D", s=28, facecolors="white",
                   edgecolors=LEVEL_COLOUR, zorder=4, label="ladder levels (extrapolated)")
    ax.axhline(fit.h0, color=charts.MUTED, linewidth=0.8, linestyle=(0, (3, 3)))
    ax.text(0.0, fit.h0, f" h0 = {fit.h0:.3f} m", va="bottom", ha="left", fontsize=8, color=charts.MUTED,
            transform=ax.get_yaxis_transform())
    ax.set_xlim(left=0)
    charts.style_axes(ax, f"discharge ({unit})", "stage (m)", "Stage-discharge rating")
    ax.grid(True, axis="x", color=charts.GRID, linewidth=0.8)
    ax.legend(loc="lower right", frameon=False)
    return fig


def residual_figure(fit: rt.RatingFit):
    """Residuals against discharge: % of the rating discharge, and stage (m)."""
    res = rt.residuals(fit)
    fig, axes = charts.new_figure(9.0, 3.4, ncols=2)
    q = res["q_obs"]
    for ax, key, label in ((axes[0], "residual_pct", "discharge residual (% of rating)"),
                           (axes[1], "residual_stage_m", "stage residual (m)")):
        ax.axhline(0.0, color=charts.MUTED, linewidth=0.8)
        ax.scatter(q, res[key], s=14, color=RECORD_COLOUR, alpha=0.75, linewidths=0)
        ax.set_xscale("log")
        charts.style_axes(ax, f"discharge ({fit.unit}, log scale)", label)
    axes[0].set_title("Observed - rating discharge", loc="left", fontsize=10)
    axes[1].set_title("Observed - rating stage at the observed discharge", loc="left", fontsize=10)
    return fig


def build_report(fit: rt.RatingFit, lev: dict, inputs: list, notes: list) -> Report:
    """The whole report (not yet written). ``inputs``: (label, value[, unit]) for the run summary."""
    rep = Report("Stage-discharge rating", algorithm="fitrating", subtitle=fit.equation)
    rep.summary(inputs, heading="Run")
    rep.section("Rating", "Q = C (h - h0)^b fitted by nonlinear least squares "
                + {"log": "on ln Q (equal weight to relative errors).",
                   "linear": "on Q (the largest flows weigh most).",
                   "stage": "on stage: h = h0 + (Q / C)^(1/b) (the best prediction of stage from discharge)."
                   }[fit.fit_space]
                + (" h0 was estimated from the records." if fit.h0_estimated else " h0 was given, not fitted."))
    rep.figure(rating_figure(fit, lev), caption="Records, fitted rating and the stage for each discharge of the "
               "ladder. Open diamonds lie outside the recorded discharges: the rating is extrapolated there.")
    table = rt.rating_table(fit)
    n_par = 4
    rep.table({k: v[:n_par] for k, v in table.items() if k != "description"}, caption="Parameters (95 % intervals "
              "from the t distribution; for C in a log-space fit, exp(ln C +- t se))", units={"value": "",
              "std_error": "", "ci95_low": "", "ci95_high": ""}, csv_name="rating_parameters.csv",
              digits={"value": 6, "std_error": 6, "ci95_low": 6, "ci95_high": 6})
    rep.table({"statistic": table["parameter"][n_par:], "value": table["value"][n_par:],
               "unit": table["unit"][n_par:], "description": table["description"][n_par:]},
              caption="Fit statistics", units={"value": ""}, csv_name="rating_statistics.csv")
    rep.section("Residuals", "Observed minus rating, for every record. A pattern (a bend, a trend with time) "
                "means one power law does not describe the control over the whole range.")
    rep.figure(residual_figure(fit), caption="Discharge residuals in % of the rating discharge, and stage "
               "residuals in m (observed stage minus the rating's stage at the observed discharge).")
    res = rt.residuals(fit)
    order = np.argsort(-np.abs(res["residual_pct"]))[:10]
    rep.table({k: np.asarray(v)[order] for k, v in res.items()}, caption="The largest residuals (up to 10)",
              units={"q_obs": fit.unit, "q_rating": fit.unit, "residual_q": fit.unit, "residual_pct": "%",
                     "row": ""}, csv_name="largest_residuals.csv")
    rep.section("Levels for the discharge ladder", "The stage the rating gives for each discharge (for example "
                "the downstream water level of the natural-regime model runs). stage_se_m is the standard error "
                "of the fitted rating there, not the scatter of a single gauging.")
    rep.table(lev, caption="LEVELS", units={"within_records": ""}, csv_name="levels.csv",
              digits={"stage_m": 3, "stage_se_m": 3})
    rep.notes(notes)
    return rep
