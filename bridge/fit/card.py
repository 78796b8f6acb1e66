"""The `.model` card of a fitted level-1 device, with comment lines that say what it rests on."""

from __future__ import annotations

from .least_squares import Level1Values


def card_value(value: float) -> str:
    """A parameter as the card writes it: five significant digits, SPICE reads it as written."""
    return f"{value:.5g}"


def model_card_text(name: str, mos_type: str, values: Level1Values, notes: tuple[str, ...] = ()) -> str:
    """`* note` lines, then `.model NAME nmos|pmos (level=1 vto=… kp=… lambda=… [gamma=… phi=…])`;
    VTO in the card's sign (negative for an enhancement PMOS)."""
    sign = -1.0 if mos_type == "pmos" else 1.0
    fields = [f"vto={card_value(sign * values.vto)}", f"kp={card_value(values.kp)}",
              f"lambda={card_value(values.lambda_)}"]  # fmt: skip
    if values.gamma is not None and values.phi is not None:
        fields += [f"gamma={card_value(values.gamma)}", f"phi={card_value(values.phi)}"]
    lines = [f"* {note}" for note in notes]
    lines.append(f".model {name} {mos_type} (level=1 {' '.join(fields)})")
    return "\n".join(lines) + "\n"


GAMMA_NOT_FITTED = "GAMMA and PHI not fitted: VBS did not vary in the data (ngspice's defaults GAMMA=0, PHI=0.6 apply)"
