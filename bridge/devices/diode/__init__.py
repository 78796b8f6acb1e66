"""The junction diode as the DC solver models it (ngspice's dio device in part): ``load`` (the
Shockley current without breakdown, GMIN in parallel), ``temperature`` (IS and N·kT/q at the
device temperature, diotemp.c) and ``placed`` (the diode in an MNA system,
``bridge.devices.interface.DcDevice``)."""

from .load import MAX_EXP_ARG, diode_current
from .placed import PlacedDiode
from .temperature import diode_at_temperature

__all__ = ["MAX_EXP_ARG", "PlacedDiode", "diode_at_temperature", "diode_current"]
