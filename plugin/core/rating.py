"""Stage-discharge rating Q = C (h - h0)^b fitted to paired stage and discharge records.

h is the stage (m), h0 the stage of zero flow (m; estimated from the records, or given), Q the
discharge in the records' unit (ML/d or m3/s), C and b the rating coefficients.

Fitting space
-------------
By default the fit minimises the squared residuals of ln Q (``fit_space="log"``):
ln Q = ln C + b ln(h - h0). Errors of stream gaugings grow roughly in proportion to the discharge,
so equal weight to relative errors is the natural choice, and the low flows - which matter most
for environmental water - are fitted as closely as the high ones. Two other choices are offered:

* ``fit_space="linear"`` minimises squared discharge residuals Q - C (h - h0)^b; the largest
  flows dominate.
* ``fit_space="stage"`` minimises squared stage residuals h - (h0 + (Q / C)^(1/b)): the rating
  read the other way, as the stage for a discharge. Choose it when the stage readings carry the
  scatter (gaugings on a rising or falling river, a shifting control) or when the purpose is the
  levels themselves - least squares on stage gives the best prediction of stage from discharge.

(Common practice, no source.) All three give the same curve on exact data; on scattered data they
differ, and the report says which was used.

Method
------
For a given h0 the log-space problem is a straight-line regression, so h0 is found first by a
profile search: the residual sum of squares is evaluated on a log-spaced grid of gaps
g = min(h) - h0 from 1e-4 to 1e3 times the stage range, then refined by bounded Brent
minimisation around the best grid point. An optimum at either end of that range means the records
do not determine h0 (no curvature, or curvature the power law cannot follow): the fit refuses and
asks for h0. The full problem (ln C, b, h0) - or (C, b, h0) in linear space - is then polished by
Levenberg-Marquardt (``scipy.optimize.least_squares``).

Standard errors are those of linearised least squares: cov = s^2 (J^T J)^-1 with J the Jacobian of
the model at the optimum in the fitting parameters and s^2 = SSR / (n - p) (the same estimate as
``scipy.optimize.curve_fit`` with ``absolute_sigma=False``). For a log-space fit the standard
error of C is C x se(ln C) (delta method) and its 95 % interval exp(ln C +- t se) (asymmetric);
other intervals are value +- t(0.975, n - p) se.

Stage for a discharge: h = h0 + (Q / C)^(1/b). Its standard error (``stage_se``) is that of the
fitted mean rating at Q (delta method on the parameter covariance); it is not the scatter of a
single gauging about the rating (see the stage residuals for that).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field

import numpy as np
from scipy import stats as sps
from scipy.optimize import least_squares, minimize_scalar

from .errors import ChannelHabitatError
from .units import m3s_to_mld, mld_to_m3s, normalise_unit, parse_numbers

FIT_SPACES = ("log", "linear", "stage")
SPACE_TEXT = {"log": "least squares on ln Q", "linear": "least squares on Q",
              "stage": "least squares on stage h (rating read as stage for discharge)"}
GAP_RANGE = (1e-4, 1e3)  # search range of min(h) - h0, as multiples of the stage range
GRID_POINTS = 241


# ============================================================================================
# Records
# ============================================================================================

@dataclass
class RatingRecords:
    """Usable paired records: stage (m) and discharge (in ``unit``), with their row numbers."""

    stage: np.ndarray
    discharge: np.ndarray
    unit: str
    rows: np.ndarray
    skipped_blank: int = 0


def _blank(v) -> bool:
    if v is None:
        return True
    if isinstance(v, float) and math.isnan(v):
        return True
    return isinstance(v, str) and v.strip() in ("", "NULL", "null", "NA", "nan", "NaN")


def _as_float(v, what: str, row: int, parameter: str) -> float:
    if isinstance(v, bool):
        raise ChannelHabitatError(f"row {row}: {what} '{v}' is not a number", parameter)
    if isinstance(v, (int, float, np.integer, np.floating)):
        x = float(v)
    else:
        s = str(v).strip()
        try:
            x = float(s)
        except ValueError:
            hint = " (write numbers without thousands separators or units)" if re.search(r"\d", s) else ""
            raise ChannelHabitatError(f"row {row}: {what} '{s}' is not a number{hint}", parameter) from None
    if not math.isfinite(x):
        raise ChannelHabitatError(f"row {row}: {what} '{v}' is not a finite number", parameter)
    return x


def records_from_values(stage_values, discharge_values, unit: str, rows=None,
                        stage_param: str = "STAGE_FIELD", discharge_param: str = "DISCHARGE_FIELD",
                        unit_param: str = "DISCHARGE_UNIT") -> RatingRecords:
    """Validate raw field values (numbers, text or None) into RatingRecords.

    Rows with an empty stage or discharge are skipped (counted); text that is not a number, and
    negative or zero discharges, are refused with the row named. ``rows``: row numbers for
    messages (default 1, 2, ...)."""
    unit = normalise_unit(unit, unit_param)
    stage_values = list(stage_values)
    discharge_values = list(discharge_values)
    if len(stage_values) != len(discharge_values):
        raise ValueError("stage and discharge columns differ in length")
    rows = list(rows) if rows is not None else list(range(1, len(stage_values) + 1))
    hs, qs, rs = [], [], []
    skipped = 0
    for h, q, r in zip(stage_values, discharge_values, rows):
        if _blank(h) or _blank(q):
            skipped += 1
            continue
        hv = _as_float(h, "stage", r, stage_param)
        qv = _as_float(q, "discharge", r, discharge_param)
        if qv < 0:
            raise ChannelHabitatError(f"row {r}: discharge {qv:g} {unit} is negative; a rating needs flows "
                                      "above zero (check the field and its sign)", discharge_param)
        if qv == 0:
            raise ChannelHabitatError(
                f"row {r}: discharge is zero; Q = C (h - h0)^b cannot be fitted to zero-flow records. Leave "
                "them out; if you know the stage of zero flow, give it as h0", discharge_param)
        hs.append(hv)
        qs.append(qv)
        rs.append(r)
    return RatingRecords(np.array(hs, dtype=float), np.array(qs, dtype=float), unit, np.array(rs), skipped)


# ============================================================================================
# The fit
# ============================================================================================

@dataclass
class RatingFit:
    """A fitted rating. ``c`` is in the records' unit per m^b; ``se``/``ci95`` by parameter name
    ('C', 'b', 'h0'); ``cov`` in the fitting parameters ``param_names``."""

    c: float
    b: float
    h0: float
    unit: str
    h0_estimated: bool
    fit_space: str
    param_names: tuple
    theta: np.ndarray
    cov: np.ndarray
    se: dict
    ci95: dict
    records: RatingRecords
    stats: dict = field(default_factory=dict)  # name -> (value, unit, description)
    notes: list = field(default_factory=list)

    # ---- the rating ------------------------------------------------------------------------
    def discharge_at(self, stage) -> np.ndarray:
        """Q at stage h (records' unit); 0 at or below h0."""
        h = np.asarray(stage, dtype=np.float64)
        x = np.maximum(h - self.h0, 0.0)
        return self.c * x ** self.b

    def stage_at(self, discharge) -> np.ndarray:
        """h = h0 + (Q / C)^(1/b) for Q in the records' unit (Q > 0)."""
        q = np.asarray(discharge, dtype=np.float64)
        return self.h0 + (q / self.c) ** (1.0 / self.b)

    def stage_se(self, discharge) -> np.ndarray:
        """Standard error (m) of the fitted rating's stage at Q (delta method, see module doc)."""
        q = np.asarray(discharge, dtype=np.float64)
        e = (q / self.c) ** (1.0 / self.b)
        grads = []
        for name in self.param_names:
            if name == "lnC":
                grads.append(-e / self.b)
            elif name == "C":
                grads.append(-e / (self.b * self.c))
            elif name == "b":
                grads.append(-e * np.log(q / self.c) / self.b ** 2)
            else:  # h0
                grads.append(np.ones_like(e))
        g = np.stack(grads, axis=-1)
        var = np.einsum("...i,ij,...j->...", g, self.cov, g)
        return np.sqrt(np.maximum(var, 0.0))

    @property
    def n(self) -> int:
        return int(self.records.stage.size)

    @property
    def dof(self) -> int:
        return self.n - len(self.param_names)

    @property
    def c_mld(self) -> float:
        return self.c if self.unit == "ML/d" else float(m3s_to_mld(self.c))

    @property
    def c_m3s(self) -> float:
        return self.c if self.unit == "m3/s" else float(mld_to_m3s(self.c))

    @property
    def equation(self) -> str:
        return f"Q = {self.c:.6g} (h - {self.h0:.4f})^{self.b:.4f}   (Q in {self.unit}, h in m)"


def _regress(x, y):
    """Least-squares line y = a + b x: (a, b, SSR)."""
    xm, ym = x.mean(), y.mean()
    sxx = np.sum((x - xm) ** 2)
    if sxx <= 0:
        return math.nan, math.nan, math.inf
    b = np.sum((x - xm) * (y - ym)) / sxx
    a = ym - b * xm
    r = y - a - b * x
    return a, b, float(r @ r)


def _profile_h0(h, lnq, parameter: str):
    """h0 minimising the log-space SSR; raises when the records do not determine it."""
    hmin = h.min()
    span = h.max() - hmin
    lo, hi = math.log(span * GAP_RANGE[0]), math.log(span * GAP_RANGE[1])
    grid = np.linspace(lo, hi, GRID_POINTS)

    def ssr(lg):
        x = np.log(h - hmin + math.exp(lg))
        return _regress(x, lnq)[2]

    vals = np.array([ssr(g) for g in grid])
    k = int(np.nanargmin(vals))
    if k in (0, GRID_POINTS - 1):
        where = "just below the lowest record" if k == 0 else "far below the lowest record"
        raise ChannelHabitatError(
            f"h0 (the stage of zero flow) cannot be estimated from these records: the best fit puts it {where} "
            f"(the search covered {span * GAP_RANGE[0]:.3g} m to {span * GAP_RANGE[1]:.3g} m below the lowest "
            "stage). Give h0 (e.g. the surveyed control or bed level at the gauge) instead", parameter)
    res = minimize_scalar(ssr, bounds=(grid[k - 1], grid[k + 1]), method="bounded",
                          options={"xatol": 1e-12, "maxiter": 500})
    lg = res.x if res.fun <= vals[k] else grid[k]
    return hmin - math.exp(lg)


def _model(theta, h, lnq, space, h0_fixed):
    """The fitted quantity: ln Q (log), Q (linear) or h (stage)."""
    if h0_fixed is None:
        p0, b, h0 = theta
    else:
        (p0, b), h0 = theta, h0_fixed
    if space == "stage":
        return h0 + np.exp((lnq - p0) / b)
    x = h - h0
    if space == "log":
        return p0 + b * np.log(x)
    return p0 * x ** b


def _jacobian(theta, h, lnq, space, h0_fixed):
    if h0_fixed is None:
        p0, b, h0 = theta
    else:
        (p0, b), h0 = theta, h0_fixed
    if space == "stage":
        e = np.exp((lnq - p0) / b)
        cols = [-e / b, -e * (lnq - p0) / (b * b)]
        if h0_fixed is None:
            cols.append(np.ones_like(h))
        return np.column_stack(cols)
    x = h - h0
    lx = np.log(x)
    if space == "log":
        cols = [np.ones_like(h), lx]
        if h0_fixed is None:
            cols.append(-b / x)
    else:
        xb = x ** b
        cols = [xb, p0 * xb * lx]
        if h0_fixed is None:
            cols.append(-p0 * b * x ** (b - 1.0))
    return np.column_stack(cols)


def fit_rating(records: RatingRecords, h0: float | None = None, fit_space: str = "log",
               records_param: str = "RECORDS", h0_param: str = "H0") -> RatingFit:
    """Fit Q = C (h - h0)^b to the records (h0 estimated when None). See the module docstring."""
    space = str(fit_space).strip().lower()
    if space not in FIT_SPACES:
        raise ChannelHabitatError(f"unknown fitting space '{fit_space}': use log, linear or stage", "FIT_SPACE")
    h, q = records.stage, records.discharge
    n = h.size
    p = 3 if h0 is None else 2
    if n < p + 1:
        what = "C, b and h0" if h0 is None else "C and b (h0 given)"
        raise ChannelHabitatError(
            f"only {n} usable record(s): fitting {what} needs at least {p + 1} ({p} parameters and one degree of "
            f"freedom for the standard errors){'; or give h0 to fit one parameter fewer' if h0 is None else ''}",
            records_param)
    if np.ptp(h) <= 0:
        raise ChannelHabitatError("all records have the same stage: a rating needs records over a range of "
                                  "stages", records_param)
    if h0 is not None:
        h0 = float(h0)
        bad = np.flatnonzero(h <= h0)
        if bad.size:
            rows = ", ".join(str(r) for r in records.rows[bad[:8]]) + (" ..." if bad.size > 8 else "")
            raise ChannelHabitatError(
                f"{bad.size} record(s) have a stage at or below h0 = {h0:g} m (rows {rows}): the rating gives no "
                "flow there. Remove those records or give a lower h0", h0_param)
    lnq = np.log(q)
    notes = []
    # --- start: log-space solution (profile for h0) --------------------------------------------
    h0_start = _profile_h0(h, lnq, h0_param) if h0 is None else h0
    a, b, _ = _regress(np.log(h - h0_start), lnq)
    if not b > 0:
        raise ChannelHabitatError(
            "the records show discharge falling as stage rises (fitted exponent b <= 0): check that the stage "
            "and discharge fields are the right way round", records_param)
    if space in ("log", "stage"):
        theta0 = np.array([a, b, h0_start]) if h0 is None else np.array([a, b])
        target = lnq if space == "log" else h
    else:
        theta0 = np.array([math.exp(a), b, h0_start]) if h0 is None else np.array([math.exp(a), b])
        target = q
    hmin = h.min()
    margin = 1e-9 * max(np.ptp(h), 1e-6)

    def resid(theta):
        if h0 is None and space != "stage" and theta[2] >= hmin:
            return np.full(n, 1e6)
        return _model(theta, h, lnq, space, h0) - target

    def jac(theta):
        return _jacobian(theta, h, lnq, space, h0)

    if space in ("log", "stage"):
        sol = least_squares(resid, theta0, jac=jac, method="lm", xtol=1e-15, ftol=1e-15, gtol=1e-15,
                            max_nfev=2000)
    else:
        lb = [0.0, 0.0] + ([-np.inf] if h0 is None else [])
        ub = [np.inf, np.inf] + ([hmin - margin] if h0 is None else [])
        sol = least_squares(resid, theta0, jac=jac, method="trf", bounds=(lb, ub), x_scale="jac",
                            xtol=1e-15, ftol=1e-15, gtol=1e-15, max_nfev=5000)
    theta = sol.x
    r0 = resid(theta0)
    if not np.all(np.isfinite(sol.fun)) or float(sol.fun @ sol.fun) > float(r0 @ r0):
        theta = theta0  # the profile solution was better (or the polish failed)
    if h0 is None and space == "linear" and theta[2] >= hmin - 2 * margin:
        raise ChannelHabitatError(
            "h0 cannot be estimated from these records in a linear-space fit (the best fit puts h0 at the lowest "
            "record). Fit in log space, or give h0", h0_param)
    r = _model(theta, h, lnq, space, h0) - target
    ssr = float(r @ r)
    dof = n - p
    s2 = ssr / dof
    J = _jacobian(theta, h, lnq, space, h0)
    try:
        cov = s2 * np.linalg.inv(J.T @ J)
    except np.linalg.LinAlgError:
        cov = np.full((p, p), np.nan)
        notes.append("the parameters are not separately determined by these records: no standard errors")
    logc = space in ("log", "stage")
    names = (("lnC" if logc else "C"), "b") + (("h0",) if h0 is None else ())
    c = math.exp(theta[0]) if logc else float(theta[0])
    bb = float(theta[1])
    hh0 = float(theta[2]) if h0 is None else h0
    sd = np.sqrt(np.maximum(np.diag(cov), 0.0))
    tq = float(sps.t.ppf(0.975, dof))
    se = {"C": c * sd[0] if logc else sd[0], "b": sd[1], "h0": sd[2] if h0 is None else math.nan}
    ci = {
        "C": (math.exp(theta[0] - tq * sd[0]), math.exp(theta[0] + tq * sd[0])) if logc
        else (c - tq * sd[0], c + tq * sd[0]),
        "b": (bb - tq * sd[1], bb + tq * sd[1]),
        "h0": (hh0 - tq * sd[2], hh0 + tq * sd[2]) if h0 is None else (math.nan, math.nan),
    }
    fit = RatingFit(c, bb, hh0, records.unit, h0 is None, space, names, np.asarray(theta, float), cov,
                    se, ci, records, notes=notes)
    fit.stats = _statistics(fit, r, target, s2, tq)
    if space == "stage" and h0 is None and hh0 >= h.min():
        notes.append(f"the fitted h0 ({hh0:.3f} m) is not below the lowest recorded stage ({h.min():.3f} m): records "
                     "there would have no flow on this rating")
    if n < 10:
        notes.append(f"only {n} records: the standard errors are rough")
    if h0 is None and abs(_corr(cov, 1, 2)) > 0.98:
        notes.append(f"b and h0 are strongly correlated (r = {_corr(cov, 1, 2):.3f}): many (b, h0) pairs fit almost "
                     "as well; a surveyed h0 would firm up the rating")
    return fit


def _corr(cov, i, j) -> float:
    if cov.shape[0] <= max(i, j):
        return math.nan
    d = math.sqrt(cov[i, i] * cov[j, j])
    return float(cov[i, j] / d) if d > 0 else math.nan


def _statistics(fit: RatingFit, r, target, s2, tq) -> dict:
    rec = fit.records
    q, h = rec.discharge, rec.stage
    qf = fit.discharge_at(h)
    res_q = q - qf
    with np.errstate(divide="ignore", invalid="ignore"):
        res_pct = 100.0 * res_q / qf
    res_h = h - fit.stage_at(q)
    sst = float(np.sum((target - target.mean()) ** 2))
    sst_q = float(np.sum((q - q.mean()) ** 2))
    u = fit.unit
    space_unit = {"log": "ln(Q)", "linear": u, "stage": "m"}[fit.fit_space]
    space_name = {"log": "ln Q", "linear": "Q", "stage": "h"}[fit.fit_space]
    st = {
        "n_records": (fit.n, "", "records used in the fit"),
        "n_skipped": (rec.skipped_blank, "", "rows left out because the stage or discharge was empty"),
        "dof": (fit.dof, "", "degrees of freedom (records minus fitted parameters)"),
        "r2": (1.0 - float(r @ r) / sst if sst > 0 else math.nan, "",
               f"coefficient of determination in the fitting space ({space_name})"),
        "r2_discharge": (1.0 - float(res_q @ res_q) / sst_q if sst_q > 0 else math.nan, "",
                         "coefficient of determination of Q itself"),
        "residual_se": (math.sqrt(s2), space_unit,
                        "standard error of the residuals in the fitting space, sqrt(SSR / dof)"
                        + (" (x 100 is about the % standard error of estimate)" if fit.fit_space == "log" else "")),
        "rmse_q": (float(np.sqrt(np.mean(res_q ** 2))), u, "root mean square discharge residual (observed - rating)"),
        "bias_q": (float(np.mean(res_q)), u, "mean discharge residual"),
        "max_abs_residual_q": (float(np.max(np.abs(res_q))), u, "largest discharge residual (absolute)"),
        "rms_residual_pct": (float(np.sqrt(np.mean(res_pct ** 2))), "%",
                             "root mean square of 100 (Q - Qrating) / Qrating"),
        "max_abs_residual_pct": (float(np.max(np.abs(res_pct))), "%", "largest percentage discharge residual"),
        "rmse_stage_m": (float(np.sqrt(np.mean(res_h ** 2))), "m",
                         "root mean square stage residual: observed stage - rating stage at the observed Q"),
        "bias_stage_m": (float(np.mean(res_h)), "m", "mean stage residual"),
        "max_abs_residual_stage_m": (float(np.max(np.abs(res_h))), "m", "largest stage residual (absolute)"),
        "q_min_records": (float(q.min()), u, "smallest recorded discharge"),
        "q_max_records": (float(q.max()), u, "largest recorded discharge"),
        "stage_min_m": (float(h.min()), "m", "lowest recorded stage"),
        "stage_max_m": (float(h.max()), "m", "highest recorded stage"),
        "t_975": (tq, "", "Student t quantile used for the 95 % intervals"),
    }
    if fit.h0_estimated:
        st["corr_b_h0"] = (_corr(fit.cov, 1, 2), "", "correlation of the estimates of b and h0")
    return st


def residuals(fit: RatingFit) -> dict:
    """Per record: row, stage_m, q_obs, q_rating, residual_q, residual_pct, stage_rating_m,
    residual_stage_m (observed minus rating)."""
    rec = fit.records
    qf = fit.discharge_at(rec.stage)
    hf = fit.stage_at(rec.discharge)
    with np.errstate(divide="ignore", invalid="ignore"):
        pct = 100.0 * (rec.discharge - qf) / qf
    return {
        "row": rec.rows, "stage_m": rec.stage, "q_obs": rec.discharge, "q_rating": qf,
        "residual_q": rec.discharge - qf, "residual_pct": pct,
        "stage_rating_m": hf, "residual_stage_m": rec.stage - hf,
    }


def rating_table(fit: RatingFit) -> dict:
    """The RATING table: parameter, value, std_error, ci95_low, ci95_high, unit, description."""
    rows = []
    c_mld, c_m3s = fit.c_mld, fit.c_m3s
    to_mld = (lambda v: v) if fit.unit == "ML/d" else (lambda v: float(m3s_to_mld(v)))
    to_m3s = (lambda v: v) if fit.unit == "m3/s" else (lambda v: float(mld_to_m3s(v)))
    eq = "Q = C (h - h0)^b"
    rows.append(("C_mld", c_mld, to_mld(fit.se["C"]), to_mld(fit.ci95["C"][0]), to_mld(fit.ci95["C"][1]),
                 "ML/d per m^b", f"rating coefficient C in {eq}, Q in ML/d"))
    rows.append(("C_m3s", c_m3s, to_m3s(fit.se["C"]), to_m3s(fit.ci95["C"][0]), to_m3s(fit.ci95["C"][1]),
                 "m3/s per m^b", f"rating coefficient C in {eq}, Q in m3/s"))
    rows.append(("b", fit.b, fit.se["b"], fit.ci95["b"][0], fit.ci95["b"][1], "", f"exponent b in {eq}"))
    rows.append(("h0_m", fit.h0, fit.se["h0"], fit.ci95["h0"][0], fit.ci95["h0"][1], "m",
                 "stage of zero flow h0, " + ("estimated" if fit.h0_estimated else "given (not fitted)")))
    for name, (value, unit, desc) in fit.stats.items():
        rows.append((name, float(value), math.nan, math.nan, math.nan, unit, desc))
    rows.append(("fit_space", math.nan, math.nan, math.nan, math.nan, "", SPACE_TEXT[fit.fit_space]))
    cols = ("parameter", "value", "std_error", "ci95_low", "ci95_high", "unit", "description")
    out = {c: [r[i] for r in rows] for i, c in enumerate(cols)}
    for c in ("value", "std_error", "ci95_low", "ci95_high"):
        out[c] = np.array(out[c], dtype=np.float64)
    for c in ("parameter", "unit", "description"):
        out[c] = np.array(out[c], dtype=str)
    return out


# ============================================================================================
# Discharge ladders and levels
# ============================================================================================

def parse_discharge_list(text: str, parameter: str = "LADDER") -> np.ndarray:
    """'3000, 4000, 5000' (commas, semicolons or spaces) -> array; positive, no repeats."""
    vals = parse_numbers(text, parameter)
    if not vals:
        raise ChannelHabitatError("give the discharges, e.g. '3000, 4000, 5000'", parameter)
    return ladder_from_values(vals, parameter)


def ladder_from_values(values, parameter: str = "LADDER") -> np.ndarray:
    """Validate discharges (numbers or text; empty entries skipped): finite, > 0, no repeats."""
    out = []
    for i, v in enumerate(values, start=1):
        if _blank(v):
            continue
        x = _as_float(v, "discharge", i, parameter)
        if x <= 0:
            raise ChannelHabitatError(f"discharge {x:g} is not positive (note: '3,000' reads as 3 and 000; write "
                                      "3000)", parameter)
        out.append(x)
    if not out:
        raise ChannelHabitatError("the discharge ladder is empty", parameter)
    arr = np.array(out, dtype=float)
    s = np.sort(arr)
    dup = np.flatnonzero(np.diff(s) <= 1e-9 * s[1:])
    if dup.size:
        raise ChannelHabitatError(f"discharge {s[dup[0]]:g} appears twice in the ladder", parameter)
    return arr


def levels(fit: RatingFit, q, unit: str, parameter: str = "LADDER") -> dict:
    """LEVELS: the rating stage for each discharge ``q`` (in ``unit``), in the given order.

    Columns q_mld, q_m3s, stage_m, stage_se_m, within_records (True when Q lies within the
    recorded discharges: outside, the rating is extrapolated)."""
    unit = normalise_unit(unit, parameter)
    q = np.asarray(q, dtype=float)
    if unit == "ML/d":
        q_mld, q_m3s = q.copy(), mld_to_m3s(q)
    else:
        q_mld, q_m3s = m3s_to_mld(q), q.copy()
    q_rec = q_mld if fit.unit == "ML/d" else q_m3s
    rq = fit.records.discharge
    lo, hi = rq.min() * (1 - 1e-12), rq.max() * (1 + 1e-12)
    return {
        "q_mld": np.asarray(q_mld, float), "q_m3s": np.asarray(q_m3s, float),
        "stage_m": fit.stage_at(q_rec), "stage_se_m": fit.stage_se(q_rec),
        "within_records": (q_rec >= lo) & (q_rec <= hi),
    }
