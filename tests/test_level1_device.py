"""Level-1 MOSFET physics checked against ngspice itself, plus closed-form checks.

ngspice cases drive the four terminals of one device from ideal voltage sources, so
the operating point is fixed by the sources and ngspice evaluates mos1 at exactly
these voltages. Tolerances: 0.2 % on currents and conductances (ngspice's RELTOL is
1e-3, so agreement is meaningful to a few parts in 10⁴ at best) with tiny absolute
floors for the picoamps its junction diodes and GMIN add, and 1 mV on voltages.
"""

from __future__ import annotations

import math
import re
import shutil
import subprocess
from dataclasses import dataclass, field
from pathlib import Path

import pytest

from bridge.devices.mos1 import (
    Level1Geometry,
    Level1Model,
    beta,
    evaluate,
    leff,
    threshold,
)
from bridge.devices.mos1.params import DEFAULT_L, DEFAULT_W

CURRENT_REL = 2e-3
CURRENT_ABS = 1e-9  # A; ngspice's junction diodes + GMIN leave pA in cutoff
CONDUCTANCE_ABS = 1e-12  # S
VOLTAGE_ABS = 1e-3  # V
NGSPICE = shutil.which("ngspice")
needs_ngspice = pytest.mark.skipif(NGSPICE is None, reason="ngspice not installed")

_PRINTED = re.compile(r"^@(\w+)\[(\w+)\]\s*=\s*(\S+)\s*$")
_INSTANCE_QUANTITIES = ("id", "gm", "gds", "gmbs", "von", "vdsat", "vgs", "vds", "vbs")
_MODEL_QUANTITIES = ("kp", "vto", "gamma", "phi")


@dataclass(frozen=True)
class DeviceCase:
    """One device at one bias, with what the bias is meant to exercise."""

    mos_type: str
    card: dict[str, float]
    bias: tuple[float, float, float, float]  # absolute V(d), V(g), V(s), V(b)
    region: str
    swapped: bool = False
    geometry: dict[str, float] = field(default_factory=lambda: {"w": 10e-6, "l": 2e-6})


def run_ngspice(case: DeviceCase, workdir: Path) -> dict[str, float]:
    """Run ngspice -b on a one-device netlist; return its op-point and model values."""
    card = " ".join(f"{name}={value!r}" for name, value in case.card.items())
    size = " ".join(f"{name}={value!r}" for name, value in case.geometry.items())
    vd, vg, vs, vb = case.bias
    netlist = "\n".join(
        [
            "level-1 reference point",
            f"vd d 0 {vd!r}",
            f"vg g 0 {vg!r}",
            f"vs s 0 {vs!r}",
            f"vb b 0 {vb!r}",
            f"m1 d g s b dut {size}",
            f".model dut {case.mos_type} ({card})",
            ".control",
            "set numdgt=12",
            "op",
            "print " + " ".join(f"@m1[{q}]" for q in _INSTANCE_QUANTITIES),
            "print " + " ".join(f"@dut[{q}]" for q in _MODEL_QUANTITIES),
            ".endc",
            ".end",
            "",
        ]
    )
    path = workdir / "dut.cir"
    path.write_text(netlist)
    done = subprocess.run(
        [NGSPICE or "ngspice", "-b", str(path)],
        capture_output=True,
        text=True,
        timeout=30,
        check=False,
    )
    values: dict[str, float] = {}
    for line in done.stdout.splitlines():
        printed = _PRINTED.match(line.strip())
        if printed:
            owner, quantity, number = printed.groups()
            values[f"{owner}.{quantity}"] = float(number)
    expected = [f"m1.{q}" for q in _INSTANCE_QUANTITIES] + [f"dut.{q}" for q in _MODEL_QUANTITIES]
    missing = [key for key in expected if key not in values]
    assert not missing, f"ngspice did not print {missing}:\n{done.stdout}\n{done.stderr}"
    return values


NMOS = {"vto": 0.7, "kp": 1e-4}
PMOS = {"vto": -0.7, "kp": 4e-5}
NMOS_DEPLETION = {"vto": -1.0, "kp": 5e-5}
NMOS_BODY = {"vto": 0.7, "kp": 1e-4, "gamma": 0.5, "phi": 0.7}
# IS=0 keeps ngspice's forward-biased bulk diode from carrying amperes at vbs = 1.6 V.
NMOS_BODY_NO_DIODES = {**NMOS_BODY, "is": 0.0}
PMOS_BODY = {"vto": -0.8, "kp": 4e-5, "gamma": 0.6, "phi": 0.65}
NMOS_CLM = {**NMOS, "lambda": 0.05}
PMOS_CLM = {**PMOS, "lambda": 0.08}
NMOS_UO_TOX = {"vto": 0.6, "tox": 20e-9, "uo": 450.0}
PMOS_TOX_ONLY = {"vto": -0.6, "tox": 15e-9}
NMOS_NSUB = {"tox": 20e-9, "nsub": 3e16, "uo": 500.0}
NMOS_NSUB_GIVEN_PHI_GAMMA = {"tox": 25e-9, "nsub": 1e16, "phi": 0.75, "gamma": 0.4, "nss": 2e10}
PMOS_NSUB_SAME_TYPE_GATE = {"tox": 20e-9, "nsub": 1e16, "tpg": -1.0, "nss": 1e11, "uo": 250.0}
NMOS_NSUB_ALUMINIUM_GATE = {"tox": 40e-9, "nsub": 5e15, "tpg": 0.0}
FOUR_IN_PARALLEL = {"w": 10e-6, "l": 2e-6, "m": 4.0}

# ngspice reports id, vgs, vds, vbs in device polarity (id positive for a conducting
# PMOS) but von and vdsat with the type's sign; test_matches_ngspice normalises them.
NGSPICE_CASES = [
    pytest.param(
        DeviceCase("nmos", NMOS, (3.0, 2.0, 0.0, 0.0), "saturation"),
        id="nmos_saturation",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("nmos", NMOS, (0.3, 2.0, 0.0, 0.0), "triode"),
        id="nmos_triode",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("nmos", NMOS, (3.0, 0.5, 0.0, 0.0), "cutoff"),
        id="nmos_cutoff_leaves_only_junction_leakage",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("nmos", NMOS, (1.0, 2.5, 1.0, 0.0), "triode"),
        id="nmos_zero_vds_is_triode_with_zero_current",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("nmos", NMOS_DEPLETION, (2.0, 0.0, 0.0, 0.0), "saturation"),
        id="nmos_depletion_conducts_at_zero_vgs",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("pmos", PMOS, (0.0, 1.0, 3.0, 3.0), "saturation"),
        id="pmos_saturation",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("pmos", PMOS, (2.7, 0.5, 3.0, 3.0), "triode"),
        id="pmos_triode",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("pmos", PMOS, (0.0, 2.6, 3.0, 3.0), "cutoff"),
        id="pmos_cutoff",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("nmos", NMOS_BODY, (3.0, 2.0, 0.0, -1.5), "saturation"),
        id="nmos_body_effect_reverse_bias_raises_vth",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("nmos", NMOS_BODY, (0.5, 2.5, 0.0, -2.0), "triode"),
        id="nmos_body_effect_reverse_bias_triode",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("nmos", NMOS_BODY, (3.0, 2.0, 0.0, 0.3), "saturation"),
        id="nmos_small_forward_body_bias_uses_tangent_root",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("nmos", NMOS_BODY_NO_DIODES, (3.0, 1.5, 0.0, 1.6), "saturation"),
        id="nmos_large_forward_body_bias_clamps_root_at_zero",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("pmos", PMOS_BODY, (0.0, 0.5, 3.0, 4.5), "saturation"),
        id="pmos_body_effect_reverse_bias_raises_vth",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("pmos", PMOS_BODY, (2.0, 0.5, 3.0, 2.75), "triode"),
        id="pmos_small_forward_body_bias_uses_tangent_root",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("nmos", NMOS_CLM, (3.0, 2.0, 0.0, 0.0), "saturation"),
        id="nmos_lambda_in_saturation",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("nmos", NMOS_CLM, (0.6, 2.5, 0.0, 0.0), "triode"),
        id="nmos_lambda_in_triode",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("pmos", PMOS_CLM, (0.5, 1.2, 3.3, 3.3), "saturation"),
        id="pmos_lambda_in_saturation",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("pmos", PMOS_CLM, (3.0, 0.0, 3.3, 3.3), "triode"),
        id="pmos_lambda_in_triode",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("nmos", {**NMOS, "ld": 0.3e-6}, (3.0, 2.0, 0.0, 0.0), "saturation"),
        id="nmos_lateral_diffusion_shortens_channel",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("nmos", NMOS_UO_TOX, (3.0, 2.0, 0.0, 0.0), "saturation"),
        id="nmos_kp_from_uo_and_tox",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("pmos", PMOS_TOX_ONLY, (2.5, 0.0, 3.0, 3.0), "triode"),
        id="pmos_kp_from_default_uo_and_tox",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("nmos", NMOS_NSUB, (3.0, 2.0, 0.0, -1.0), "saturation"),
        id="nmos_vto_gamma_phi_from_nsub",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("nmos", NMOS_NSUB_GIVEN_PHI_GAMMA, (0.4, 2.0, 0.0, -0.5), "triode"),
        id="nmos_nsub_keeps_given_phi_and_gamma",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("pmos", PMOS_NSUB_SAME_TYPE_GATE, (0.0, 0.0, 3.0, 3.5), "saturation"),
        id="pmos_vto_from_nsub_same_type_gate_with_nss",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("nmos", NMOS_NSUB_ALUMINIUM_GATE, (3.0, 2.5, 0.0, 0.0), "saturation"),
        id="nmos_vto_from_nsub_aluminium_gate",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("nmos", NMOS, (3.0, 2.0, 0.0, 0.0), "saturation", geometry=FOUR_IN_PARALLEL),
        id="nmos_multiplier_m_scales_current",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("nmos", NMOS, (0.2, 1.5, 0.0, 0.0), "triode", geometry={}),
        id="nmos_default_geometry_is_100u_square",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("nmos", NMOS_BODY, (0.0, 2.0, 3.0, -0.5), "saturation", swapped=True),
        id="nmos_reversed_vds_swaps_ends_in_saturation",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("nmos", {**NMOS_BODY, "lambda": 0.03}, (0.0, 3.0, 0.4, -1.0), "triode", swapped=True),
        id="nmos_reversed_vds_swaps_ends_in_triode",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("pmos", PMOS_BODY, (3.0, 1.0, 0.0, 3.0), "saturation", swapped=True),
        id="pmos_reversed_vds_swaps_ends_in_saturation",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        DeviceCase("pmos", {**PMOS_BODY, "lambda": 0.04}, (3.3, 0.0, 3.0, 3.3), "triode", swapped=True),
        id="pmos_reversed_vds_swaps_ends_in_triode",  # reference: ngspice 39 (mos1), run directly
    ),
]


@needs_ngspice
@pytest.mark.parametrize("case", NGSPICE_CASES)
def test_matches_ngspice(case: DeviceCase, tmp_path: Path) -> None:
    # reference: ngspice 39 (mos1), run directly
    ngspice = run_ngspice(case, tmp_path)
    model = Level1Model.from_card(case.mos_type, case.card)
    point = evaluate(model, Level1Geometry(**case.geometry), *case.bias)
    sign = model.polarity

    assert point.region == case.region
    assert point.swapped is case.swapped

    # ngspice's id is already in device polarity: positive for a conducting PMOS.
    assert point.id == pytest.approx(ngspice["m1.id"], rel=CURRENT_REL, abs=CURRENT_ABS)
    assert point.drain_current == pytest.approx(sign * ngspice["m1.id"], rel=CURRENT_REL, abs=CURRENT_ABS)
    for conductance in ("gm", "gds", "gmbs"):
        assert getattr(point, conductance) == pytest.approx(
            ngspice[f"m1.{conductance}"], rel=CURRENT_REL, abs=CONDUCTANCE_ABS
        ), conductance
    # von and vdsat carry the type's sign in ngspice; multiply by it to normalise.
    assert point.vth == pytest.approx(sign * ngspice["m1.von"], abs=VOLTAGE_ABS)
    assert point.vdsat == pytest.approx(sign * ngspice["m1.vdsat"], abs=VOLTAGE_ABS)
    for voltage in ("vgs", "vds", "vbs"):
        assert getattr(point, voltage) == pytest.approx(ngspice[f"m1.{voltage}"], abs=VOLTAGE_ABS)

    # The derived model values are deterministic (no Newton loop), so they match
    # ngspice to its printed digits, not merely to RELTOL.
    assert model.kp == pytest.approx(ngspice["dut.kp"], rel=1e-9)
    assert model.vto == pytest.approx(ngspice["dut.vto"], rel=1e-9, abs=1e-12)
    assert model.gamma == pytest.approx(ngspice["dut.gamma"], rel=1e-9, abs=1e-12)
    assert model.phi == pytest.approx(ngspice["dut.phi"], rel=1e-9)


MODEL_ONLY_CASES = [
    pytest.param(
        "nmos",
        {"tox": 20e-9, "nsub": 1e16},
        id="nmos_nsub_tox_derive_all_three",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        "pmos",
        {"tox": 10e-9, "nsub": 4e16},
        id="pmos_nsub_tox_derive_all_three",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        "pmos",
        {"tox": 20e-9, "nsub": 1e16, "tpg": 0.0, "phi": 0.7},
        id="pmos_aluminium_gate_with_given_phi",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        "pmos",
        {"tox": 20e-9, "nsub": 2e10},
        id="light_doping_clamps_phi_at_0v1",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        "nmos",
        {"nsub": 1e16},
        id="nsub_without_tox_derives_nothing",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        "nmos",
        {"tox": 20e-9, "uo": 300.0, "kp": 7e-5, "nsub": 1e17, "vto": 0.5},
        id="given_kp_beats_uo_and_tox",  # reference: ngspice 39 (mos1), run directly
    ),
    pytest.param(
        "nmos",
        {"tox": 20e-9, "nsub": 1e16, "tnom": 50.0},
        id="nonstandard_tnom_shifts_fermi_potential",  # reference: ngspice 39 (mos1), run directly
    ),
]


@needs_ngspice
@pytest.mark.parametrize("mos_type, card", MODEL_ONLY_CASES)
def test_derived_model_values_match_ngspice(mos_type: str, card: dict[str, float], tmp_path: Path) -> None:
    # reference: ngspice 39 (mos1), run directly. The bias is irrelevant here; only
    # the model values ngspice derived in its setup and temperature pass are compared.
    case = DeviceCase(mos_type, card, (0.0, 0.0, 0.0, 0.0), region="any")
    ngspice = run_ngspice(case, tmp_path)
    model = Level1Model.from_card(mos_type, card)
    assert model.kp == pytest.approx(ngspice["dut.kp"], rel=1e-9)
    assert model.vto == pytest.approx(ngspice["dut.vto"], rel=1e-9, abs=1e-12)
    assert model.gamma == pytest.approx(ngspice["dut.gamma"], rel=1e-9, abs=1e-12)
    assert model.phi == pytest.approx(ngspice["dut.phi"], rel=1e-9)


# --- closed-form checks: textbook square law (from memory) ---------------------


def test_beta_is_kp_times_w_times_m_over_effective_length() -> None:
    # textbook square law (from memory): β = KP·W/Leff, Leff = L − 2·LD, M in parallel
    model = Level1Model.from_card("nmos", {"kp": 1e-4, "ld": 0.25e-6})
    geometry = Level1Geometry(w=20e-6, l=2.5e-6, m=3)
    assert leff(model, geometry) == pytest.approx(2.0e-6)
    assert beta(model, geometry) == pytest.approx(1e-4 * 20e-6 * 3 / 2.0e-6)


def test_threshold_with_body_effect_follows_sqrt_law() -> None:
    # textbook square law (from memory): Vth = VTO + γ(√(φ − vbs) − √φ)
    model = Level1Model.from_card("nmos", {"vto": 0.7, "gamma": 0.45, "phi": 0.7})
    assert threshold(model, 0.0) == pytest.approx(0.7)
    assert threshold(model, -2.0) == pytest.approx(0.7 + 0.45 * (math.sqrt(2.7) - math.sqrt(0.7)))


def test_threshold_is_positive_for_enhancement_pmos() -> None:
    # textbook square law (from memory): a PMOS with VTO = −0.8 V needs |vgs| > 0.8 V
    model = Level1Model.from_card("pmos", {"vto": -0.8, "gamma": 0.5})
    assert threshold(model, 0.0) == pytest.approx(0.8)
    assert threshold(model, -1.0) > 0.8


def test_forward_body_bias_threshold_is_tangent_then_clamped() -> None:
    model = Level1Model.from_card("nmos", {"vto": 0.7, "gamma": 0.5, "phi": 0.64})
    tangent_root = 0.8 - 0.2 / (2 * 0.8)
    assert threshold(model, 0.2) == pytest.approx(0.7 + 0.5 * (tangent_root - 0.8))
    # beyond vbs = 2·PHI the root is clamped at 0: Vth = VTO − γ√φ
    assert threshold(model, 2.0) == pytest.approx(0.7 - 0.5 * 0.8)


def test_saturation_and_triode_currents_follow_square_law() -> None:
    # textbook square law (from memory): Id = β/2·vov²·(1+λvds); β·vds(vov − vds/2)·(1+λvds)
    model = Level1Model.from_card("nmos", {"vto": 1.0, "kp": 2e-4, "lambda": 0.1})
    geometry = Level1Geometry(w=4e-6, l=1e-6)
    gain = 8e-4
    saturated = evaluate(model, geometry, vd=2.0, vg=2.0, vs=0.0, vb=0.0)
    assert saturated.id == pytest.approx(gain / 2 * 1.0**2 * 1.2)
    assert saturated.gds == pytest.approx(0.1 * gain / 2)
    linear = evaluate(model, geometry, vd=0.5, vg=2.0, vs=0.0, vb=0.0)
    assert linear.id == pytest.approx(gain * 0.5 * (1.0 - 0.25) * 1.05)


def test_current_is_continuous_at_the_saturation_edge() -> None:
    model = Level1Model.from_card("nmos", {"vto": 0.5, "kp": 1e-4, "lambda": 0.02})
    geometry = Level1Geometry(w=10e-6, l=1e-6)
    edge = evaluate(model, geometry, vd=1.0, vg=1.5, vs=0.0, vb=0.0)
    below = evaluate(model, geometry, vd=1.0 - 1e-9, vg=1.5, vs=0.0, vb=0.0)
    assert (edge.region, below.region) == ("saturation", "triode")
    assert below.id == pytest.approx(edge.id, rel=1e-6)
    assert below.gm == pytest.approx(edge.gm, rel=1e-6)


def test_pmos_drain_current_flows_out_of_the_drain_node() -> None:
    model = Level1Model.from_card("pmos", {"vto": -0.7, "kp": 4e-5})
    point = evaluate(model, Level1Geometry(), vd=0.0, vg=0.0, vs=3.0, vb=3.0)
    assert point.id > 0.0
    assert point.drain_current == pytest.approx(-point.id)


def test_swapped_device_mirrors_the_unswapped_one() -> None:
    # Exchanging drain and source terminals only reverses the current.
    model = Level1Model.from_card("nmos", {"vto": 0.6, "kp": 1e-4, "gamma": 0.4, "lambda": 0.05})
    geometry = Level1Geometry(w=5e-6, l=1e-6)
    forward = evaluate(model, geometry, vd=2.0, vg=1.8, vs=0.1, vb=-0.5)
    reverse = evaluate(model, geometry, vd=0.1, vg=1.8, vs=2.0, vb=-0.5)
    assert reverse.swapped and not forward.swapped
    assert reverse.id == pytest.approx(-forward.id)
    assert reverse.drain_current == pytest.approx(-forward.drain_current)
    assert (reverse.gm, reverse.gds, reverse.gmbs) == pytest.approx((forward.gm, forward.gds, forward.gmbs))


BIASES = {
    "nmos_saturation": ("nmos", 3.0, 2.0, 0.0, -1.0),
    "nmos_triode": ("nmos", 0.4, 2.0, 0.0, -1.0),
    "nmos_forward_body": ("nmos", 0.4, 2.0, 0.0, 0.3),
    "nmos_swapped": ("nmos", 0.0, 2.0, 0.5, -1.0),
    "pmos_saturation": ("pmos", 0.0, 1.0, 3.0, 4.0),
    "pmos_triode": ("pmos", 2.6, 0.0, 3.0, 4.0),
    "pmos_swapped_saturation": ("pmos", 3.0, 1.0, 0.0, 3.0),
    "pmos_forward_body": ("pmos", 2.6, 0.0, 3.0, 2.8),
}


@pytest.mark.parametrize("mos_type, vd, vg, vs, vb", BIASES.values(), ids=BIASES.keys())
def test_terminal_conductances_are_the_partial_derivatives(
    mos_type: str, vd: float, vg: float, vs: float, vb: float
) -> None:
    sign = 1.0 if mos_type == "nmos" else -1.0
    card = {"vto": sign * 0.7, "kp": 5e-5, "gamma": 0.5, "phi": 0.7, "lambda": 0.04}
    model = Level1Model.from_card(mos_type, card)
    geometry = Level1Geometry(w=10e-6, l=2e-6)
    point = evaluate(model, geometry, vd, vg, vs, vb)
    assert point.region != "cutoff"
    step = 1e-6
    bias = {"vd": vd, "vg": vg, "vs": vs, "vb": vb}
    terminals = {"vd": "wrt_drain", "vg": "wrt_gate", "vs": "wrt_source", "vb": "wrt_bulk"}
    for terminal, wrt in terminals.items():
        up = evaluate(model, geometry, **{**bias, terminal: bias[terminal] + step})
        down = evaluate(model, geometry, **{**bias, terminal: bias[terminal] - step})
        slope = (up.drain_current - down.drain_current) / (2 * step)
        assert getattr(point.conductances, wrt) == pytest.approx(slope, rel=1e-5, abs=1e-12), wrt
    g = point.conductances
    assert g.wrt_drain + g.wrt_gate + g.wrt_source + g.wrt_bulk == pytest.approx(0.0, abs=1e-15)


def test_cutoff_conducts_nothing() -> None:
    model = Level1Model.from_card("nmos", {"vto": 0.7})
    point = evaluate(model, Level1Geometry(), vd=3.0, vg=0.7, vs=0.0, vb=0.0)
    assert point.region == "cutoff"
    assert (point.id, point.gm, point.gds, point.gmbs, point.vdsat) == (0.0, 0.0, 0.0, 0.0, 0.0)


# --- card handling ---------------------------------------------------------------


def test_defaults_are_ngspice_defaults() -> None:
    model = Level1Model.from_card("nmos", {})
    assert (model.kp, model.vto, model.phi, model.gamma, model.lambda_, model.ld, model.uo) == (
        2e-5, 0.0, 0.6, 0.0, 0.0, 0.0, 600.0,
    )  # fmt: skip
    assert model.derived == ()
    assert model.source_of("kp") == "default"
    assert Level1Geometry() == Level1Geometry(w=DEFAULT_W, l=DEFAULT_L, m=1.0)
    assert DEFAULT_W == DEFAULT_L == 100e-6


def test_kp_from_uo_and_tox_is_recorded_as_derived() -> None:
    model = Level1Model.from_card("nmos", {"tox": 20e-9, "uo": 500.0, "vto": 0.7})
    assert model.derived == ("kp",)
    assert model.source_of("KP") == "KP from UO·εox/TOX"
    assert model.source_of("vto") == "given"
    assert model.source_of("tox") == "given"
    assert model.kp == pytest.approx(500 * 3.9 * 8.854e-12 / 20e-9 * 1e-4, rel=1e-4)


def test_nsub_derivations_are_recorded_and_given_values_win() -> None:
    model = Level1Model.from_card("nmos", {"tox": 20e-9, "nsub": 1e16, "phi": 0.7})
    assert set(model.derived) == {"kp", "gamma", "vto"}
    assert model.phi == 0.7
    assert model.source_of("phi") == "given"
    assert model.source_of("gamma").startswith("GAMMA from NSUB")


def test_aliases_vt0_and_u0_are_accepted() -> None:
    model = Level1Model.from_card("nmos", {"VT0": 0.9, "u0": 400.0, "tox": 10e-9})
    assert model.vto == 0.9
    assert model.uo == 400.0


def test_nsub_below_intrinsic_density_is_an_error() -> None:
    with pytest.raises(ValueError, match="intrinsic"):
        Level1Model.from_card("nmos", {"tox": 20e-9, "nsub": 1e10})


def test_nsub_without_tox_is_flagged() -> None:
    model = Level1Model.from_card("nmos", {"nsub": 1e16})
    assert model.derived == ()
    assert any("NSUB given without TOX" in caveat for caveat in model.caveats)


def test_series_resistance_is_flagged_and_off_nominal_tnom_no_longer_is() -> None:
    # TNOM ≠ 27 °C is now modelled (at_temperature rescales from it), so it is no caveat.
    model = Level1Model.from_card("nmos", {"tnom": 25.0, "rd": 10.0})
    assert not model.at_nominal_temperature
    assert not any("TNOM" in caveat for caveat in model.caveats)
    assert any("RD" in caveat for caveat in model.caveats)
    assert Level1Model.from_card("nmos", {}).caveats == ()


def test_unknown_parameters_are_reported() -> None:
    assert Level1Model.from_card("nmos", {"vtoo": 1.0}).unrecognised == ("vtoo",)


def test_bad_type_or_level_is_an_error() -> None:
    with pytest.raises(ValueError, match="nmos"):
        Level1Model.from_card("npn", {})
    with pytest.raises(ValueError, match="LEVEL=3"):
        Level1Model.from_card("nmos", {"level": 3})


def test_non_positive_effective_length_is_an_error() -> None:
    model = Level1Model.from_card("nmos", {"ld": 0.5e-6})
    with pytest.raises(ValueError, match="effective channel length"):
        beta(model, Level1Geometry(w=1e-6, l=1e-6))


def test_non_positive_geometry_is_an_error() -> None:
    with pytest.raises(ValueError, match="W must be positive"):
        Level1Geometry(w=0.0)


def test_with_lambda_gamma_is_dataclasses_replace() -> None:
    import dataclasses

    card = Level1Model.from_card("pmos", {"vto": -0.8, "kp": 40e-6, "lambda": 0.03, "gamma": 0.5, "tox": 1e-8})
    for lambda_, gamma in ((0.0, 0.0), (card.lambda_, 0.0), (0.0, card.gamma)):
        ours = card.with_lambda_gamma(lambda_, gamma)
        assert ours == dataclasses.replace(card, lambda_=lambda_, gamma=gamma)
        assert vars(ours) == vars(dataclasses.replace(card, lambda_=lambda_, gamma=gamma))
    assert card.lambda_ == 0.03 and card.gamma == 0.5  # the card itself untouched
