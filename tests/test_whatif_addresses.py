"""Result addresses: ``PlanResult[address]`` reads the field each name stands for.

The checks tie each address to the physics of the field it must read, not to the code that
reads it: I_C = β·I_B in forward-active for the constant-drop model (the model's definition,
Sedra & Smith, *Microelectronic Circuits*, the BJT chapter, from memory); V_CE as the node
difference of the solved circuit; supply power = V_supply · I_supply (Joule's law / definition of
power); the swing peak as the smaller of the two swings (the definition of a symmetric unclipped
peak).
"""

from __future__ import annotations

import importlib.resources
import math

import pytest

import ampplan
from ampplan.analyses.addresses import CHAIN_RESULTS, STAGE_RESULTS, check_result_address, result_addresses
from ampplan.errors import UnknownNameError


@pytest.fixture(scope="module")
def demo():
    with importlib.resources.as_file(importlib.resources.files("ampplan") / "data/demo_plan.json") as path:
        plan = ampplan.Plan.load(path)
    return plan, plan.solve()


def test_every_address_of_the_issue_is_there(demo):
    # The names are a contract (issue 8): check the list itself.
    assert tuple(STAGE_RESULTS) == ("ic", "ib", "vce", "region", "saturation_margin", "cutoff_margin", "swing",
                                    "swing_to_saturation", "swing_to_cutoff", "gain", "input_resistance",
                                    "output_resistance", "dissipation")
    assert tuple(CHAIN_RESULTS) == ("gain", "input_resistance", "output_resistance", "max_source_amplitude",
                                    "limiting_stage", "supply_current", "supply_power", "status")
    plan, result = demo
    addresses = result_addresses(plan.stage_ids)
    assert len(addresses) == 13 * len(plan.stage_ids) + 8
    for address in addresses:
        result[address]  # every one reads


def test_stage_addresses_read_the_physics(demo):
    plan, result = demo
    op = result.operating_point
    for sid, stage in zip(plan.stage_ids, result.stages):
        q = op.circuit.element(next(n for n in op.transistors if n.startswith(sid)))
        device = plan.get(f"{sid}.device")
        assert result[f"{sid}.region"] == "forward-active"
        # Constant-drop forward-active: I_C = beta * I_B (the model's definition).
        assert math.isclose(result[f"{sid}.ic"], device.beta * result[f"{sid}.ib"], rel_tol=1e-9)
        # V_CE is the solved node difference.
        assert math.isclose(result[f"{sid}.vce"], op.v[q.collector] - op.v[q.emitter], rel_tol=1e-12)
        # The swing peak is the smaller of the two swings.
        assert result[f"{sid}.swing"] == min(result[f"{sid}.swing_to_saturation"], result[f"{sid}.swing_to_cutoff"])
        assert result[f"{sid}.swing_to_saturation"] == stage.swing.toward_saturation
        assert result[f"{sid}.swing_to_cutoff"] == stage.swing.toward_cutoff
        # Transistor power I_C*V_CE + I_B*V_BE (definition of power); a PNP's textbook-sign
        # currents flow the other way, against its negative voltages.
        t = op.transistors[q.name]
        sign = 1.0 if device.polarity == "npn" else -1.0
        assert math.isclose(result[f"{sid}.dissipation"], sign * (t.ic * t.vce + t.ib * t.vbe), rel_tol=1e-9)
        for name in ("saturation_margin", "cutoff_margin", "gain", "input_resistance", "output_resistance"):
            assert result[f"{sid}.{name}"] == getattr(stage, name)


def test_chain_addresses_read_the_chain(demo):
    plan, result = demo
    # P = V * I for the one supply of the demo (no negative supply).
    assert math.isclose(result["supply_power"], plan.supply * result["supply_current"], rel_tol=1e-12)
    assert result["status"] == "ok"
    assert result["limiting_stage"] in plan.stage_ids
    assert result["input_resistance"] == result.stages[0].input_resistance
    assert result["output_resistance"] == result.stages[-1].output_resistance
    for name in ("gain", "max_source_amplitude", "supply_current"):
        assert result[name] == getattr(result, name)


@pytest.mark.parametrize("address, message", [
    ("s1.vc", r"result address 's1.vc': a stage has no result 'vc'; did you mean 'vce'\?"),
    ("s1.nothing", r"result address 's1.nothing': a stage has no result 'nothing'; per stage: ic, ib"),
    ("s9.ic", r"result address 's9.ic': the plan has no stage 's9'; its stages are s1, s2, s3"),
    ("gian", r"no result 'gian'; did you mean 'gain'\?"),
    ("vce", r"no result 'vce'; did you mean 's\d.vce'"),
    (3, r"a result address is text such as 's1.vce' or 'gain', got 3"),
])
def test_unknown_result_addresses_are_named(demo, address, message):
    plan, result = demo
    with pytest.raises(UnknownNameError, match=message):
        result[address]
    with pytest.raises(UnknownNameError, match=message):
        check_result_address(address, plan.stage_ids)
