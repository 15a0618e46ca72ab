"""Site check: does the weather belong to the site the scenario names, in its clock?

A sign error in the UTC offset or the longitude, or a latitude that overrides the weather
file's, gives plausible-looking but wrong results (the sun is put at night, the pond is
moved to another climate). Two checks catch it when the forcing is loaded:

1. **Header check** — the scenario's latitude, longitude and UTC offset against the
   coordinates and time zone in the weather file's own header (EPW, TMY2/3), where the
   file has them. Beyond :data:`HEADER_TOLERANCE_DEG` in latitude or longitude, or any
   difference in the UTC offset, the check flags the site.
2. **Data check** — for every source, including a CSV without metadata: the time of the
   day's irradiance peak in the data against the solar noon computed for the site as
   given. Per day, the circular (24 h) centroid of the hourly GHI is compared with that
   of the clear-sky GHI the forcing carries for the site (a symmetric curve centred on
   the computed solar noon, so the second centroid IS solar noon on the hour grid):

   .. math::

      \\Delta t_d = \\frac{24\\,\\mathrm{h}}{2\\pi}\\,
      \\arg\\frac{\\sum_h G_h\\,e^{i\\theta_h}}{\\sum_h G_{\\mathrm{clear},h}\\,e^{i\\theta_h}},
      \\qquad \\theta_h = 2\\pi\\,\\frac{h + 1/2}{24}

   The check reports the median of :math:`\\Delta t_d` over the days whose GHI reaches
   :data:`CLEAR_DAY_FRACTION` of the clear-sky day (cloudy days, whose centroid wanders
   with the clouds, are left out; with too few such days, all days with sun are used).
   The median over a year is robust to afternoon cloud and to odd days. A shift beyond
   :data:`NOON_TOLERANCE_H` flags the site: a shift of *s* hours is what a UTC offset
   wrong by *s* h, a longitude wrong by 15·*s* degrees, or hour labels at the wrong end
   of the hour would give. The circular centroid also works when the error moves the
   sun across midnight.

3. **Zone check** — the longitude against the UTC offset: a site's standard time keeps
   within a few hours of its mean solar time, ``longitude / 15`` h (wrapped to ±12 h).
   Beyond :data:`ZONE_TOLERANCE_H` the sign of the longitude or of the offset is almost
   surely wrong. This check also covers clear-sky mode, whose weather is computed from
   the coordinates as given and so always passes the data check.

The result goes into the forcing's metadata (``meta["site_check"]``, a one-line text,
and ``meta["site_check_ok"]``), from there into the run's summary on the terminal, the
results' netCDF attributes and the output set's README. The scenario key
``weather.site_check`` (or ``--strict`` on the command line) chooses between a warning
(``warn``, default) and refusing the run (``strict``).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from pondsim.errors import InputError

#: Largest latitude or longitude difference between scenario and weather-file header that
#: passes [deg]. Assumption: ~110 km, room for a weather station near but not at the site
#: (common practice: the nearest station of a network is used for a site).
HEADER_TOLERANCE_DEG = 1.0
#: Largest UTC offset difference that passes [h]: offsets differ by whole or half hours,
#: so any difference is an error.
HEADER_TOLERANCE_OFFSET_H = 0.01
#: Largest median shift between the data's irradiance centroid and the computed solar
#: noon that passes [h]. Measured on the pvlib-shipped TMY3/TMY2 files and the demo EPW:
#: |shift| <= 0.04 h with the right offset (Greensboro 723170TYA -0.02 h, Sand Point
#: 703165TY -0.004 h, Miami 12839.tm2 -0.03 h); an offset wrong by one hour gives 1.0 h.
NOON_TOLERANCE_H = 0.4
#: A day counts as clear enough for the noon check when its GHI reaches this fraction
#: of the clear-sky GHI (assumption).
CLEAR_DAY_FRACTION = 0.6
#: Largest difference between the UTC offset and the longitude's mean solar time
#: (longitude / 15 h, wrapped) that passes [h]. Assumption: civil time zones stray up to
#: about 3 h from their meridian (from memory: far-western China on UTC+8 at 75 deg E);
#: a sign error in the longitude or in the offset gives 2 |offset| or 2 |longitude|/15,
#: which beyond 4 h is not a time zone in use.
ZONE_TOLERANCE_H = 4.0
#: Fewer clear days than this: all days with sun are used instead.
MIN_CLEAR_DAYS = 20
HOURS_PER_DAY = 24


@dataclass
class SiteCheck:
    """Outcome of the site check.

    Attributes
    ----------
    problems : list of str
        What disagrees (empty: the site passes).
    noon_shift_h : float or None
        Median over days of (data irradiance centroid − computed solar noon) [h];
        positive: the data's sun peaks later than computed.
    days_used : int
        Days the median is taken over.
    header : dict
        The file header's latitude, longitude and UTC offset (None where absent).
    """

    problems: list[str] = field(default_factory=list)
    noon_shift_h: float | None = None
    days_used: int = 0
    header: dict = field(default_factory=dict)

    @property
    def ok(self) -> bool:
        return not self.problems

    def text(self) -> str:
        """One line for the run summary, the netCDF attributes and the README."""
        shift = None if self.noon_shift_h is None else round(self.noon_shift_h, 2) + 0.0
        noon = ("noon check not possible (no daylight data)" if shift is None
                else f"irradiance peak {shift:+.2f} h from the computed solar "
                     f"noon (median over {self.days_used} days)")  # + 0.0: no "-0.00"
        if self.ok:
            has_header = any(v is not None for v in self.header.values())
            return ("passed: " + ("file header agrees; " if has_header else
                                  "no coordinates in the file header; ") + noon)
        return "FAILED: " + "; ".join(self.problems) + "; " + noon


def _finite(value) -> float | None:
    try:
        v = float(value)
    except (TypeError, ValueError):
        return None
    return v if np.isfinite(v) else None


def compare_header(given: Mapping, header: Mapping) -> list[str]:
    """Disagreements between the scenario's site and the weather file's header.

    Parameters
    ----------
    given : mapping
        ``latitude``, ``longitude`` [deg], ``utc_offset_h`` [h] as the scenario gives them
        (None: not given, the file's value is used).
    header : mapping
        The same keys as the file's header states them (None: absent).
    """
    problems = []
    for key, tol, unit in (("latitude", HEADER_TOLERANCE_DEG, "deg"),
                           ("longitude", HEADER_TOLERANCE_DEG, "deg"),
                           ("utc_offset_h", HEADER_TOLERANCE_OFFSET_H, "h")):
        mine, theirs = _finite(given.get(key)), _finite(header.get(key))
        if mine is None or theirs is None:
            continue
        diff = mine - theirs
        if key == "longitude":
            diff = (diff + 180.0) % 360.0 - 180.0
        if abs(diff) > tol:
            problems.append(f"site.{key} = {mine:g} {unit} but the weather file says "
                            f"{theirs:g} {unit} (allowed difference {tol:g} {unit})")
    return problems


def noon_shift_h(ghi, ghi_clear, index: pd.DatetimeIndex) -> tuple[float | None, int]:
    """Median shift of the data's daily irradiance centroid from the computed solar noon.

    Parameters
    ----------
    ghi, ghi_clear : array-like [W m-2]
        Hourly GHI of the data and clear-sky GHI for the site as given, on ``index``.
    index : DatetimeIndex
        Hour-start labels in local standard time, whole days of 24 hours.

    Returns
    -------
    shift_h : float or None
        Median over the days used [h] (None without a day of sun).
    days : int
        Number of days used.
    """
    ghi = np.asarray(ghi, dtype=float)
    clear = np.asarray(ghi_clear, dtype=float)
    n_days = len(ghi) // HOURS_PER_DAY
    if n_days == 0:
        return None, 0
    shape = (n_days, HOURS_PER_DAY)
    g = np.clip(np.nan_to_num(ghi[: n_days * HOURS_PER_DAY]), 0, None).reshape(shape)
    c = np.clip(np.nan_to_num(clear[: n_days * HOURS_PER_DAY]), 0, None).reshape(shape)
    hours = np.asarray(index[: n_days * HOURS_PER_DAY].hour, dtype=float).reshape(shape)
    phase = np.exp(2j * np.pi * (hours + 0.5) / HOURS_PER_DAY)
    z_obs, z_clear = (g * phase).sum(axis=1), (c * phase).sum(axis=1)
    day_obs, day_clear = g.sum(axis=1), c.sum(axis=1)
    sunny = (day_obs > 0) & (day_clear > 0) & (np.abs(z_obs) > 0) & (np.abs(z_clear) > 0)
    clear_days = sunny & (day_obs >= CLEAR_DAY_FRACTION * day_clear)
    use = clear_days if clear_days.sum() >= MIN_CLEAR_DAYS else sunny
    if not use.any():
        return None, 0
    shift = np.angle(z_obs[use] / z_clear[use]) * HOURS_PER_DAY / (2 * np.pi)
    # the median of a circular quantity: centre on the circular mean first
    centre = np.angle(np.mean(np.exp(2j * np.pi * shift / HOURS_PER_DAY))) \
        * HOURS_PER_DAY / (2 * np.pi)
    rel = (shift - centre + HOURS_PER_DAY / 2) % HOURS_PER_DAY - HOURS_PER_DAY / 2
    median = (centre + float(np.median(rel)) + HOURS_PER_DAY / 2) % HOURS_PER_DAY \
        - HOURS_PER_DAY / 2
    return float(median), int(use.sum())


def zone_mismatch_h(longitude, utc_offset_h) -> float | None:
    """UTC offset minus the longitude's mean solar time, wrapped to [-12, 12) [h].

    ``longitude`` [deg, east positive], ``utc_offset_h`` [h]; None when either is
    missing. Zero for a site on its zone's meridian (e.g. -105 deg and UTC-7).
    """
    lon, offset = _finite(longitude), _finite(utc_offset_h)
    if lon is None or offset is None:
        return None
    return float((offset - lon / 15.0 + 12.0) % 24.0 - 12.0)


def check_site(forcing: pd.DataFrame, given: Mapping, header: Mapping | None = None
               ) -> SiteCheck:
    """Run the header check and the data check (module docstring).

    Parameters
    ----------
    forcing : DataFrame
        The forcing table (``ghi`` and ``ghi_clear`` [W m-2] on hour-start local labels).
    given : mapping
        The scenario's ``latitude``, ``longitude``, ``utc_offset_h`` (None: not given).
    header : mapping, optional
        The weather file's header values of the same keys.
    """
    header = dict(header or {})
    header = {k: _finite(header.get(k)) for k in ("latitude", "longitude", "utc_offset_h")}
    problems = compare_header(given, header)
    zone = zone_mismatch_h(given.get("longitude"), given.get("utc_offset_h"))
    if zone is not None and abs(zone) > ZONE_TOLERANCE_H:
        problems.append(
            f"UTC offset {float(given['utc_offset_h']):+g} h is {abs(zone):.1f} h from the "
            f"mean solar time of longitude {float(given['longitude']):g} deg (allowed "
            f"{ZONE_TOLERANCE_H:g} h): check the sign of site.longitude (east positive) "
            "and of site.utc_offset_h")
    shift, days = noon_shift_h(forcing["ghi"], forcing["ghi_clear"], forcing.index)
    if shift is not None and abs(shift) > NOON_TOLERANCE_H:
        when = "after" if shift > 0 else "before"
        problems.append(
            f"the data's irradiance peaks {abs(shift):.1f} h {when} the solar noon computed "
            f"for the site (allowed {NOON_TOLERANCE_H:g} h): check site.utc_offset_h "
            f"(off by about {-shift:+.1f} h?), site.longitude (east positive; off by about "
            f"{15 * shift:+.0f} deg?) and whether the file's times label the start or the "
            "end of each hour")
    return SiteCheck(problems=problems, noon_shift_h=shift, days_used=days, header=header)


def record_site_check(forcing: pd.DataFrame, meta: dict, given: Mapping, *,
                      strict: bool = False, path=None) -> SiteCheck:
    """Run :func:`check_site` against ``meta["file_site"]`` (the header
    :func:`pondsim.forcing.weather.read_weather` found) and record the outcome in
    ``meta``: ``site_check`` (one line), ``site_check_ok`` and, when it fails, a note.

    Raises
    ------
    InputError
        When the check fails and ``strict`` is true (field ``site``).
    """
    check = check_site(forcing, given, meta.get("file_site"))
    meta["site_check"] = check.text()
    meta["site_check_ok"] = check.ok
    if not check.ok:
        if strict:
            raise InputError("site check failed: " + "; ".join(check.problems) + " (strict "
                             "mode; without --strict or with weather.site_check = 'warn' "
                             "it is a warning)", path=path, field="site")
        meta.setdefault("notes", []).append("site check FAILED: "
                                            + "; ".join(check.problems))
    return check
