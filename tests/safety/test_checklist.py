"""Tests of bench.safety.checklist: the arming checklist's items, its verdict, its records and its runners.

The eyewear figures are checked against a hand calculation from the published limits
(EU Directive 2006/25/EC Annex II, Table 2.3 for exposures of 10 s and more, with C_A from
Table 2.5; the same values as ANSI Z136.1-2007 / IEC 60825-1:2007, table numbers from memory)
and OD = log10(exposure / MPE) (ANSI Z136.1, from memory). That eyewear, beam enclosure,
beam dumps and warning signs are checked before class 3B / 4 emission is ANSI Z136.1 section 4
practice (from memory).
"""

from __future__ import annotations

import math
import uuid

import pytest
from scipy.constants import zero_Celsius

from bench.config import load_bench, load_bench_text
from bench.errors import ConfigError
from bench.safety import checklist as cl
from bench.safety import checklist_answers as ca
from bench.safety import guard as g
from bench.safety.exposure_limits import caution_text

CFG = load_bench()
GOOD_READINGS = {
    cl.READ_INTERLOCK: True,
    cl.READ_MOUNT_TEMPERATURE: 25.0 + zero_Celsius,
    cl.READ_SETPOINT: 0.0,
    cl.READ_CURRENT_LIMIT: 9.5,
}


class FakeClock:
    def __init__(self, t: float = 200.0, step: float = 0.0) -> None:
        self.t = t
        self.step = step

    def __call__(self) -> float:
        self.t += self.step
        return self.t


def good_answers():
    return ca.answers_from_flags("ana", {940e-9: 5, 1030e-9: 2}, confirm_all=True)


def run(answers, readings=GOOD_READINGS, operator="ana", items=None, clock=None):
    return cl.evaluate(items or cl.checklist_items(CFG), answers, readings, operator, clock or FakeClock())


# --------------------------------------------------------------------------------------------
# Items


def test_items_in_order_one_eyewear_item_per_wavelength():
    items = cl.checklist_items(CFG)
    assert [i.id for i in items] == [
        "interlock",
        "eyewear@940nm",
        "eyewear@1030nm",
        "beam_enclosed",
        "beam_dumps",
        "warning_sign",
        "mount_temperature",
        "current_limit",
    ]
    assert [i.kind for i in items] == [
        "check",
        "eyewear",
        "eyewear",
        "confirm",
        "confirm",
        "confirm",
        "check",
        "check",
    ]
    assert items[1].lasers == ("pump",) and items[2].lasers == ("probe",)


def test_required_od_matches_a_hand_calculation():
    # Pump: 940 nm, P = 1.05 W/A x (9 - 0.6) A = 8.82 W in a 0.2 mm beam, 10 s (no aversion
    # response outside 400-700 nm). MPE (2006/25/EC Table 2.3): E = 10 C_A W/m^2 with
    # C_A = 10^(0.002 (940 - 700)) = 3.020, so 30.20 W/m^2. The whole beam passes the 7 mm
    # aperture: E = 8.82 W / (pi (3.5 mm)^2) = 2.292e5 W/m^2; OD = log10(2.292e5 / 30.20) = 3.88
    # -> OD 4. Probe: 1030 nm, 1 mW, 0.1 mm: C_A = 10^0.66 = 4.571, MPE 45.71 W/m^2; E = 25.98 W/m^2
    # is below the MPE -> OD 0.
    items = {i.id: i for i in cl.checklist_items(CFG)}
    assert items["eyewear@940nm"].required_od == 4
    assert "OD 3.88 exact" in items["eyewear@940nm"].note
    assert items["eyewear@1030nm"].required_od == 0
    assert math.log10((8.82 / (math.pi * 3.5e-3**2)) / (10 * 10 ** (0.002 * 240))) == pytest.approx(
        3.880, abs=1e-3
    )


def test_prompts_show_the_caution_and_wavelength():
    for item in cl.checklist_items(CFG):
        if item.kind == cl.EYEWEAR:
            assert caution_text() in item.note
            assert f"{item.wavelength * 1e9:g} nm" in item.prompt
            assert f"OD {item.required_od} or more" in item.prompt
    assert "never replace" in cl.SECOND_LAYER_NOTICE and "ANSI Z136.1" in cl.SECOND_LAYER_NOTICE


def test_the_simulated_bench_asks_the_same_questions():
    real = load_bench(
        overrides={
            "bench.simulated": "false",
            **{
                f"instruments.{role}.resource": f"TCPIP::192.0.2.{k}::5025::SOCKET"  # TEST-NET-1 (RFC 5737)
                for k, role in enumerate(("detector", "pump", "shutter"), start=1)
            },
        }
    )
    assert CFG.simulated and not real.simulated
    assert cl.checklist_items(real) == cl.checklist_items(CFG)


def test_lasers_at_one_wavelength_share_one_item_with_their_powers_added():
    cfg = load_bench(overrides={"probe.wavelength": "940 nm"})
    (item,) = [i for i in cl.checklist_items(cfg) if i.kind == cl.EYEWEAR]
    assert item.lasers == ("pump", "probe")
    # 8.821 W into the smallest beam (0.1 mm): still all through 7 mm, OD 3.88 -> 4 (as above)
    assert item.required_od == 4


def test_a_wavelength_the_tool_cannot_evaluate_refuses_arming():
    cfg = load_bench(overrides={"pump.wavelength": "2900 nm"})  # beyond the 400-2600 nm implemented
    items = cl.checklist_items(cfg)
    eyewear = [i for i in items if i.kind == cl.EYEWEAR and i.required_od is None]
    assert eyewear and "cannot compute" in eyewear[0].prompt
    result = cl.evaluate(
        items, ca.answers_from_flags("ana", {2900e-9: 7, 1030e-9: 2}, True), GOOD_READINGS, "ana", FakeClock()
    )
    assert not result.passed
    assert any("could not be computed" in r for r in result.refusals)


def test_a_pulsed_probe_is_flagged_for_a_separate_evaluation():
    text = load_bench().text.replace('kind = "cw"', 'kind = "pulsed"\npulse_energy = "1 uJ"')
    cfg = load_bench_text(text, "<pulsed test bench>")
    assert cfg.probe.kind == "pulsed"
    (probe,) = [i for i in cl.checklist_items(cfg) if "probe" in i.lasers]
    assert "pulsed" in probe.note and "separate evaluation" in probe.note


# --------------------------------------------------------------------------------------------
# Verdict


def test_passes_when_everything_is_fine_and_records_every_answer():
    clock = FakeClock(step=0.5)
    items = cl.checklist_items(CFG)
    result = cl.evaluate(items, good_answers(), GOOD_READINGS, "ana", clock)
    assert result.passed and result.refusals == []
    assert len(result.records) == len(items) + 1
    assert all(r.kind == "checklist" and r.who == "ana" for r in result.records)
    assert [r.data["item"] for r in result.records[:-1]] == [i.id for i in items]
    times = [r.t for r in result.records]
    assert times == sorted(times) and times[0] > 200.0  # dated by the run clock
    assert result.completed_at == times[-1] and result.operator == "ana"
    assert result.records[1].data["answer"] == 5.0 and result.records[1].data["required_od"] == 4


def test_low_eyewear_od_refuses_arming():
    result = run(ca.answers_from_flags("ana", {940e-9: 3, 1030e-9: 2}, True))
    assert not result.passed
    (reason,) = result.refusals
    assert "OD 3" in reason and "940 nm" in reason and "OD 4 required" in reason


def test_missing_eyewear_od_refuses_arming():
    result = run(ca.answers_from_flags("ana", {940e-9: 5}, True))
    assert not result.passed
    assert result.refusals == ["no eyewear OD given for 1030 nm (required: OD 0 or more)"]


def test_missing_confirmations_refuse_arming():
    result = run(ca.answers_from_flags("ana", {940e-9: 5, 1030e-9: 2}, confirm_all=False))
    assert not result.passed
    assert len(result.refusals) == 3 and all(r.startswith("not answered") for r in result.refusals)


def test_a_no_refuses_arming():
    answers = good_answers()
    answers["beam_dumps"] = cl.Answer(False, who="ana")
    result = run(answers)
    assert result.refusals == [f"answered no: {cl.CONFIRMATIONS['beam_dumps']}"]


def test_no_operator_refuses_arming():
    result = run(ca.answers_from_flags("", {940e-9: 5, 1030e-9: 2}, True), operator=" ")
    assert not result.passed and "no operator named" in result.refusals[0]


def test_an_answer_by_someone_else_refuses_arming():
    result = run(good_answers(), operator="bo")
    assert not result.passed and "answered by 'ana'" in result.refusals[0]


def test_an_eyewear_od_for_a_wavelength_not_on_the_bench_is_refused():
    result = run(ca.answers_from_flags("ana", {940e-9: 5, 1030e-9: 2, 975e-9: 6}, True))
    assert not result.passed
    assert "975nm" in result.refusals[0] and "940nm, 1030nm" in result.refusals[0]


@pytest.mark.parametrize(
    ("key", "value", "words"),
    [
        (cl.READ_INTERLOCK, False, "reads open"),
        (cl.READ_INTERLOCK, cl.Unreadable("TimeoutError: no reply"), "could not read the interlock"),
        (cl.READ_INTERLOCK, None, "was not read"),
        (cl.READ_MOUNT_TEMPERATURE, 40.0 + zero_Celsius, "above its window"),
        (cl.READ_MOUNT_TEMPERATURE, 10.0 + zero_Celsius, "below its window"),
        (cl.READ_SETPOINT, 9.5, "setpoint 9.5 A is above"),
        (cl.READ_CURRENT_LIMIT, 12.0, "above the diode's rating 10 A"),
    ],
)
def test_driver_readings_that_refuse_arming(key, value, words):
    readings = dict(GOOD_READINGS)
    readings[key] = value
    result = run(good_answers(), readings=readings)
    assert not result.passed
    assert any(words in r for r in result.refusals), result.refusals


def test_a_driver_without_a_current_limit_query_still_passes():
    readings = {k: v for k, v in GOOD_READINGS.items() if k != cl.READ_CURRENT_LIMIT}
    assert run(good_answers(), readings=readings).passed


def test_read_pump_turns_failures_into_refusals():
    class Pump:
        def interlock_closed(self):
            return True

        def mount_temperature(self):
            raise TimeoutError("no reply before the timeout")

        def current_setpoint(self):
            return 0.0

    readings = cl.read_pump(Pump())
    assert isinstance(readings[cl.READ_MOUNT_TEMPERATURE], cl.Unreadable)
    assert cl.READ_CURRENT_LIMIT not in readings
    result = run(good_answers(), readings=readings)
    assert any("could not read the mount temperature" in r and "no reply" in r for r in result.refusals)


def test_each_result_arms_the_guard_once():
    clock = FakeClock()
    a = run(good_answers(), clock=clock)
    b = run(good_answers(), clock=clock)
    assert a.token != b.token
    guard = g.Guard()
    assert guard.handle(g.Arm(a, "ana"), clock()).accepted
    guard.handle(g.Disarm("ana"), clock())
    assert not guard.handle(g.Arm(a, "ana"), clock()).accepted


# --------------------------------------------------------------------------------------------
# Flags and the terminal


@pytest.mark.parametrize(
    ("text", "expected"), [("976nm=5", (976e-9, 5.0)), (" 1.03 um = 2.5 ", (1030e-9, 2.5))]
)
def test_parse_eyewear_flag(text, expected):
    wavelength, od = ca.parse_eyewear_flag(text)
    assert wavelength == pytest.approx(expected[0]) and od == expected[1]


@pytest.mark.parametrize("text", ["976nm", "976nm=high", "5kg=3", "=4", "976nm=-1"])
def test_bad_eyewear_flags_name_the_option(text):
    with pytest.raises(ConfigError, match="--eyewear-od"):
        ca.parse_eyewear_flag(text)


def test_flags_give_the_same_ids_as_the_items():
    answers = ca.answers_from_flags("ana", {ca.parse_eyewear_flag("940nm=5")[0]: 5}, False)
    assert list(answers) == ["eyewear@940nm"]
    assert answers["eyewear@940nm"].who == "ana"


def scripted(replies):
    asked: list[str] = []
    replies = list(replies)

    def input_fn(prompt: str) -> str:
        asked.append(prompt)
        if not replies:
            raise EOFError
        return replies.pop(0)

    return input_fn, asked


def test_interactive_asks_one_at_a_time_and_dates_each_answer():
    items = cl.checklist_items(CFG)
    input_fn, asked = scripted(["5", "2", "yes", "y", "YES"])
    shown: list[str] = []
    clock = FakeClock(step=1.0)
    answers = ca.run_interactive(
        items, input_fn, shown.append, operator="ana", readings=GOOD_READINGS, clock=clock
    )
    assert len(asked) == 5  # the three checks are shown, not asked
    assert "940 nm" in asked[0] and "OD 4 or more" in asked[0]
    assert "1030 nm" in asked[1]
    assert cl.CONFIRMATIONS["beam_enclosed"] in asked[2]
    assert cl.SECOND_LAYER_NOTICE in shown and caution_text() in shown
    assert any("hardware interlock reads closed" in s for s in shown)
    ts = [a.t for a in answers.values()]
    assert ts == sorted(ts) and len(set(ts)) == 5  # each answer has its own time
    result = cl.evaluate(items, answers, GOOD_READINGS, "ana", clock)
    assert result.passed
    assert [r.t for r in result.records[1:6]] == [answers[i.id].t for i in items[1:6]]


def test_interactive_re_asks_unusable_replies_and_stops_at_a_refusal():
    items = cl.checklist_items(CFG)
    input_fn, asked = scripted(["lots", "3", "yes"])
    shown: list[str] = []
    answers = ca.run_interactive(items, input_fn, shown.append, operator="ana")
    assert len(asked) == 2  # "lots" re-asked, then OD 3 < 4 stops the checklist
    assert any("Arming will be refused" in s and "OD 4" in s for s in shown)
    assert not cl.evaluate(items, answers, GOOD_READINGS, "ana", FakeClock()).passed


def test_interactive_stops_at_end_of_input():
    items = cl.checklist_items(CFG)
    input_fn, asked = scripted(["5"])
    answers = ca.run_interactive(items, input_fn, lambda s: None, operator="ana")
    assert list(answers) == ["eyewear@940nm"]
    result = cl.evaluate(items, answers, GOOD_READINGS, "ana", FakeClock())
    assert not result.passed and any("1030 nm" in r for r in result.refusals)


def test_interactive_needs_an_operator():
    with pytest.raises(ValueError, match="operator"):
        ca.run_interactive(cl.checklist_items(CFG), input, print, operator="")


def test_evaluate_validates_its_arguments():
    with pytest.raises(ValueError, match="items"):
        cl.evaluate([], {}, {}, "ana")
    with pytest.raises(ValueError, match="answers"):
        cl.evaluate(cl.checklist_items(CFG), [], {}, "ana")  # type: ignore[arg-type]
    with pytest.raises(ValueError, match="kind"):
        cl.Item("x", "x", "maybe")
    with pytest.raises(ValueError, match="wavelength"):
        cl.eyewear_id(-1.0)


def test_token_is_a_fresh_uuid():
    result = run(good_answers())
    assert uuid.UUID(result.token).hex == result.token
