"""The level-1 MOSFET's convergence aids: ngspice's voltage limiting (devsup.c), as mos1load.c
applies it between Newton iterations, and the critical voltage of its junctions."""

from __future__ import annotations

import math

import numpy as np

ROOT2 = math.sqrt(2.0)


def vcrit(thermal: float, saturation_current: float) -> float:
    """ngspice's critical voltage for pnjlim: where the junction current bends up fastest."""
    if saturation_current <= 0.0:
        return math.inf
    return thermal * math.log(thermal / (ROOT2 * saturation_current))


def pnjlim(new: float, old: float, thermal: float, vcrit: float) -> tuple[float, bool]:
    """ngspice's DEVpnjlim: steps of a junction voltage above vcrit grow only logarithmically.

    Returns the voltage to use and whether it was clipped (ngspice's icheck).
    """
    if new > vcrit and abs(new - old) > 2.0 * thermal:
        if old > 0.0:
            arg = 1.0 + (new - old) / thermal
            return (old + thermal * math.log(arg) if arg > 0.0 else vcrit), True
        return thermal * math.log(new / thermal), True
    if new < 0.0:
        # Reverse steps are limited too (ngspice's addition to the SPICE3 routine).
        floor = -old - 1.0 if old > 0.0 else 2.0 * old - 1.0
        if new < floor:
            return floor, True
    return new, False


def fetlim(new: float, old: float, vto: float) -> float:
    """ngspice's DEVfetlim: keep a gate-voltage step from jumping across the threshold."""
    high = abs(2.0 * (old - vto)) + 2.0
    low = abs(old - vto) + 1.0
    vtox = vto + 3.5
    step = new - old
    if old >= vto:
        if old >= vtox:
            if step <= 0.0:
                if new >= vtox:
                    if -step > low:
                        new = old - low
                else:
                    new = max(new, vto + 2.0)
            elif step >= high:
                new = old + high
        elif step <= 0.0:
            new = max(new, vto - 0.5)
        else:
            new = min(new, vto + 4.0)
    elif step <= 0.0:
        if -step > high:
            new = old - high
    else:
        vtemp = vto + 0.5
        if new <= vtemp:
            if step > low:
                new = old + low
        else:
            new = vtemp
    return new


def limvds(new: float, old: float) -> float:
    """ngspice's DEVlimvds: bound a drain–source step."""
    if old >= 3.5:
        if new > old:
            return min(new, 3.0 * old + 2.0)
        if new < 3.5:
            return max(new, 2.0)
        return new
    if new > old:
        return min(new, 4.0)
    return max(new, -0.5)


def gate_drain_limit(vgs: float, vds: float, old_vgs: float, old_vds: float, von: float) -> tuple[float, float]:
    """mos1load.c's limiting of vgs and vds: fetlim on the gate voltage of the side acting as
    source, limvds on the drain–source voltage."""
    vgd = vgs - vds
    if old_vds >= 0.0:
        vgs = fetlim(vgs, old_vgs, von)
        vds = limvds(vgs - vgd, old_vds)
    else:
        vgd = fetlim(vgd, old_vgs - old_vds, von)
        vds = -limvds(-(vgs - vgd), -old_vds)
        vgs = vgd + vds
    return vgs, vds


def limit_channel(state: list[float], vgs: float, vds: float, vbs: float) -> tuple[float, float, float, float, bool]:
    """``limit`` for a device without bulk junctions: vgs and vds limited alike (fetlim, limvds),
    vbs taken as it is (no junction to clip, so never clipped)."""
    old_vgs, old_vds, _, _, von = state
    vgs, vds = gate_drain_limit(vgs, vds, old_vgs, old_vds, von)
    return vgs, vds, vbs, vbs - vds, False


def limit(
    state: list[float], vgs: float, vds: float, vbs: float, thermal: float, source_vcrit: float, drain_vcrit: float
) -> tuple[float, float, float, float, bool]:
    """mos1load.c's limiting of new device-polarity voltages against the last ones.

    `state` is the last vgs, vds, vbs, vbd and von; `thermal` kT/q of the bulk junctions.
    Returns vgs, vds, vbs, vbd to evaluate at and whether a junction step was clipped.
    """
    old_vgs, old_vds, old_vbs, old_vbd, von = state
    vgs, vds = gate_drain_limit(vgs, vds, old_vgs, old_vds, von)
    if vds >= 0.0:
        vbs, clipped = pnjlim(vbs, old_vbs, thermal, source_vcrit)
        vbd = vbs - vds
    else:
        vbd, clipped = pnjlim(vbs - vds, old_vbd, thermal, drain_vcrit)
        vbs = vbd + vds
    return vgs, vds, vbs, vbd, clipped


# --- the same limiting over numpy arrays (a batch of Newton iterations at once) ---------------
#
# Each array form is its scalar function above with every branch an ``np.where``, the branches
# in the same order; tests/test_dcbatch.py checks them against the scalar forms on every branch.
# None of them changes a step of 0.5 V or less unless a junction is forward-biased past vcrit
# (``needs_limiting``), so a batch limits only the rows that take a larger step.

LIMIT_FREE_STEP = 0.5  # V: fetlim and limvds leave every step up to this alone (see fetlim, limvds)


def pnjlim_arrays(new: np.ndarray, old: np.ndarray, thermal, vcrit) -> tuple[np.ndarray, np.ndarray]:
    """``pnjlim`` over arrays: the voltages to use and which were clipped."""
    with np.errstate(invalid="ignore", divide="ignore"):
        forward = (new > vcrit) & (np.abs(new - old) > 2.0 * thermal)
        arg = 1.0 + (new - old) / thermal
        from_old = np.where(arg > 0.0, old + thermal * np.log(np.where(arg > 0.0, arg, 1.0)), vcrit)
        from_zero = thermal * np.log(np.where(new > 0.0, new, 1.0) / thermal)
        forward_value = np.where(old > 0.0, from_old, from_zero)
    floor = np.where(old > 0.0, -old - 1.0, 2.0 * old - 1.0)
    reverse = ~forward & (new < 0.0) & (new < floor)
    clipped = forward | reverse
    return np.where(forward, forward_value, np.where(reverse, floor, new)), clipped


def fetlim_arrays(new: np.ndarray, old: np.ndarray, vto) -> np.ndarray:
    """``fetlim`` over arrays."""
    high = np.abs(2.0 * (old - vto)) + 2.0
    low = np.abs(old - vto) + 1.0
    vtox = vto + 3.5
    step = new - old
    down = step <= 0.0
    # old ≥ vtox
    far_on = np.where(
        down,
        np.where(new >= vtox, np.where(-step > low, old - low, new), np.maximum(new, vto + 2.0)),
        np.where(step >= high, old + high, new),
    )
    # vto ≤ old < vtox
    near_on = np.where(down, np.maximum(new, vto - 0.5), np.minimum(new, vto + 4.0))
    # old < vto
    vtemp = vto + 0.5
    off = np.where(
        down,
        np.where(-step > high, old - high, new),
        np.where(new <= vtemp, np.where(step > low, old + low, new), vtemp),
    )
    return np.where(old >= vto, np.where(old >= vtox, far_on, near_on), off)


def limvds_arrays(new: np.ndarray, old: np.ndarray) -> np.ndarray:
    """``limvds`` over arrays."""
    high_old = np.where(new > old, np.minimum(new, 3.0 * old + 2.0), np.where(new < 3.5, np.maximum(new, 2.0), new))
    low_old = np.where(new > old, np.minimum(new, 4.0), np.maximum(new, -0.5))
    return np.where(old >= 3.5, high_old, low_old)


def gate_drain_limit_arrays(vgs, vds, old_vgs, old_vds, von) -> tuple[np.ndarray, np.ndarray]:
    """``gate_drain_limit`` over arrays."""
    vgd = vgs - vds
    normal = old_vds >= 0.0
    limited_vgs = fetlim_arrays(vgs, old_vgs, von)
    normal_vds = limvds_arrays(limited_vgs - vgd, old_vds)
    limited_vgd = fetlim_arrays(vgd, old_vgs - old_vds, von)
    swapped_vds = -limvds_arrays(-(vgs - limited_vgd), -old_vds)
    return (
        np.where(normal, limited_vgs, limited_vgd + swapped_vds),
        np.where(normal, normal_vds, swapped_vds),
    )


def limit_arrays(
    state: tuple[np.ndarray, ...], vgs, vds, vbs, thermal, source_vcrit, drain_vcrit
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """``limit`` over arrays: `state` the last vgs, vds, vbs, vbd and von (arrays); returns vgs,
    vds, vbs, vbd to evaluate at and which rows had a junction step clipped."""
    old_vgs, old_vds, old_vbs, old_vbd, von = state
    vgs, vds = gate_drain_limit_arrays(vgs, vds, old_vgs, old_vds, von)
    normal = vds >= 0.0
    source_side, source_clipped = pnjlim_arrays(vbs, old_vbs, thermal, source_vcrit)
    drain_side, drain_clipped = pnjlim_arrays(vbs - vds, old_vbd, thermal, drain_vcrit)
    vbs = np.where(normal, source_side, drain_side + vds)
    vbd = np.where(normal, source_side - vds, drain_side)
    return vgs, vds, vbs, vbd, np.where(normal, source_clipped, drain_clipped)


def limit_channel_arrays(state: tuple[np.ndarray, ...], vgs, vds, vbs):
    """``limit_channel`` over arrays (no junctions: vbs as it is, never clipped)."""
    old_vgs, old_vds, _, _, von = state
    vgs, vds = gate_drain_limit_arrays(vgs, vds, old_vgs, old_vds, von)
    return vgs, vds, vbs, vbs - vds, np.zeros(np.shape(vgs), dtype=bool)


def needs_limiting(state: tuple[np.ndarray, ...], vgs, vds, vbs, source_vcrit, drain_vcrit) -> np.ndarray:
    """The rows where ``limit_arrays`` may change anything: a step of vgs, vgd, vds, vbs or vbd
    beyond LIMIT_FREE_STEP, or a junction forward-biased past its vcrit. Every other row comes
    out of it unchanged (fetlim clips only steps past 0.5 V, limvds, as the MOSFET applies it
    with a non-negative old value, only steps past 0.5 V, pnjlim only forward voltages past vcrit
    or reverse steps past 1 V), but for the rounding of vds through vgs − vgd that the scalar
    form has too."""
    old_vgs, old_vds, old_vbs, old_vbd, _ = state
    vbd = vbs - vds
    far = (
        (np.abs(vgs - old_vgs) > LIMIT_FREE_STEP)
        | (np.abs(vds - old_vds) > LIMIT_FREE_STEP)
        | (np.abs((vgs - vds) - (old_vgs - old_vds)) > LIMIT_FREE_STEP)
        | (np.abs(vbs - old_vbs) > LIMIT_FREE_STEP)
        | (np.abs(vbd - old_vbd) > LIMIT_FREE_STEP)
    )
    return far | (vbs > source_vcrit) | (vbd > drain_vcrit) | ~np.isfinite(vgs + vds + vbs)


def vcrit_arrays(thermal, saturation_current):
    """``vcrit`` over arrays of kT/q and saturation currents (inf where the current is not positive)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        positive = saturation_current > 0.0
        value = thermal * np.log(thermal / (ROOT2 * np.where(positive, saturation_current, 1.0)))
    return np.where(positive, value, math.inf)
