"""Pump duty at the sources of pressure mains: flow, head, power, energy and its present value.

* head = source HGL - sump level (the water level the pump lifts from; the
  ground at the source unless given), never below 0;
* hydraulic power = ρ g Q H (ρ = 1000 kg/m³, g = 9.80665 m/s²);
* shaft power = hydraulic power / η (η: wire-to-water efficiency of pump
  and motor, default 0.75);
* annual energy = shaft power × hours a year; its present value over the
  price table's years at its discount rate (annuity factor);
* pump station price = fixed + per kW of shaft power (no power, no
  station).

References
----------
.. [1] Pump power P = ρ g Q H / η: any hydraulics or pump handbook, e.g.
   Karassik et al., *Pump Handbook*, 4th ed., McGraw-Hill, 2008 (from
   memory).
"""

from __future__ import annotations

import numpy as np

from .friction import G

__all__ = ["RHO_WATER", "pump_duty"]

#: Density of water used for pump power, kg/m³.
RHO_WATER = 1000.0


def pump_duty(flow_lps, source_hgl_m, sump_m, prices, *, efficiency=0.75):
    """Duty, power, energy and station price of the pump at each source.

    Parameters
    ----------
    flow_lps : array_like, shape (s,)
        Design flow leaving each source, L/s.
    source_hgl_m : array_like, shape (s,)
        Hydraulic grade at each source, m above datum.
    sump_m : array_like, shape (s,)
        Water level the pump lifts from, m above datum.
    prices : PriceTable
    efficiency : float, default=0.75
        Pump and motor efficiency, 0 < η <= 1.

    Returns
    -------
    dict of str to ndarray (one value per source)
        flow_lps, head_m, hydraulic_kw, shaft_kw, annual_kwh, energy_cost_pv,
        station_cost.

    Examples
    --------
    >>> from mainspan.hydraulics.prices import default_prices
    >>> d = pump_duty([89.75], [307.0], [210.1], default_prices())
    >>> round(float(d["hydraulic_kw"][0]), 1), round(float(d["shaft_kw"][0]), 1)
    (85.3, 113.7)
    """
    q = np.asarray(flow_lps, float) / 1000.0
    head = np.maximum(np.asarray(source_hgl_m, float) - np.asarray(sump_m, float), 0.0)
    hyd_kw = RHO_WATER * G * q * head / 1000.0
    shaft_kw = hyd_kw / float(efficiency)
    return {
        "flow_lps": q * 1000.0,
        "head_m": head,
        "hydraulic_kw": hyd_kw,
        "shaft_kw": shaft_kw,
        "annual_kwh": shaft_kw * prices.hours_per_year,
        "energy_cost_pv": prices.energy_cost_pv(shaft_kw),
        "station_cost": prices.pump_station_cost(shaft_kw),
    }
