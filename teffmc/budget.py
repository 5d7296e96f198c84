"""The dimming budget between two epochs.

Notes
-----
With ``V(T, veil, theta)`` the model V magnitude at Earth, epochs ``a`` (reference)
and ``b``, the change ``dV = V_b - V_a`` is split by changing one group of
parameters at a time, in a fixed order (a telescoping sum, so the parts add up to
``dV`` exactly)::

    temperature = V(T_b, veil_a, theta_a) - V(T_a, veil_a, theta_a)
    veil        = V(T_b, veil_b, theta_a) - V(T_b, veil_a, theta_a)
    radius      = V(T_b, veil_b, theta_b) - V(T_b, veil_b, theta_a)

"temperature" holds the photosphere parameters (``teff``, ``logg``, ``mh`` and the
cool-patch parameters), "veil" the circumstellar dust (``veil_tau``, ``veil_cover``,
``grain_radius``, ``veil_scatter``) and the interstellar ``a_v``/``r_v`` when they
are per-epoch, "radius" the angular diameter ``theta`` (at fixed distance the
radius). The order matters when the effects interact; it is stated in the output.
"""

import numpy as np

from .components import all_parameters

__all__ = ["GROUPS", "dimming_budget"]

GROUPS = {g: tuple(n for n, d in all_parameters().items() if d.group == g)
          for g in ("temperature", "veil", "radius")}   # declared by teffmc.components


def dimming_budget(v_of, pa, pb):
    """Split ``V_b - V_a`` into temperature, veil and radius parts.

    Parameters
    ----------
    v_of : callable
        ``v_of(p) -> (n,)`` model V magnitudes for parameter arrays ``p``.
    pa, pb : dict
        Parameter arrays (n,) of the reference epoch and the other epoch.

    Returns
    -------
    dict
        ``delta_v``, ``dv_temperature``, ``dv_veil``, ``dv_radius`` (n,) [mag] and
        ``frac_temperature`` = dv_temperature / delta_v.
    """
    steps = [dict(pa)]
    current = dict(pa)
    for group in ("temperature", "veil", "radius"):
        current = dict(current)
        for k in GROUPS[group]:
            if k in pb:
                current[k] = pb[k]
        steps.append(current)
    v = [v_of(p) for p in steps]
    out = {"delta_v": v[3] - v[0], "dv_temperature": v[1] - v[0], "dv_veil": v[2] - v[1],
           "dv_radius": v[3] - v[2]}
    with np.errstate(divide="ignore", invalid="ignore"):
        out["frac_temperature"] = out["dv_temperature"] / out["delta_v"]
    return out
