"""The level-1 MOSFET's convergence aids: ngspice's voltage limiting (devsup.c), as mos1load.c
applies it between Newton iterations, and the critical voltage of its junctions."""

from __future__ import annotations

import math

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
