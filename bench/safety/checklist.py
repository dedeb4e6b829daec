"""The arming checklist: the questions asked before the guard may be armed, and their verdict.

Data and a pure evaluator. `checklist_items` turns a bench into a list of `Item`; `evaluate`
judges the answers and the readings from the pump driver and returns a `ChecklistResult`
(passed, the reasons for refusing, one ``"checklist"`` `Event` per answer with operator and
time). The answers come from `bench.safety.checklist_answers`: `run_interactive` asks the items
one at a time on a terminal, `answers_from_flags` builds the same answers from command-line flags
(``--operator NAME --eyewear-od 976nm=5``) for headless use. The simulated bench asks exactly the same questions as a real one.

Items, in order:

1. the hardware interlock reads closed (read from the pump driver, not asked);
2. laser-safety eyewear, one item per laser wavelength on the bench (pump at its maximum power,
   probe at its power, each with its beam diameter from the bench file): the operator enters
   the OD their eyewear is rated for at that wavelength; a rating below the OD computed by
   `bench.safety.exposure_limits.required_od` refuses arming;
3. beam path enclosed, beam dumps in place, warning sign or light on (yes/no);
4. mount temperature within its window, and the current limit at or below the diode's rating
   (read from the driver and the bench file).

This checklist is a second layer only. It never replaces the hardware interlock, the laser
safety officer (LSO), ANSI Z136.1 / IEC 60825-1 or local rules; the eyewear figures are a
calculation aid whose caution (`bench.safety.exposure_limits.caution_text`) is shown with every prompt.

References
----------
.. [1] ANSI Z136.1-2014, American National Standard for Safe Use of Lasers: control measures
   for class 3B and class 4 (eyewear of adequate optical density at each wavelength, beam
   enclosure, beam stops, warning signs and lights; from memory).
.. [2] IEC 60825-1:2014, Safety of laser products - Part 1, and IEC TR 60825-14:2004, a user's
   guide (the same control measures; from memory).
"""

from __future__ import annotations

import math
import time
import uuid
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

from bench.config import BenchConfig
from bench.records import Event
from bench.safety import exposure_limits as laser_safety

CHECK = "check"
CONFIRM = "confirm"
EYEWEAR = "eyewear"
KINDS = (CHECK, CONFIRM, EYEWEAR)

INTERLOCK_ITEM = "interlock"
MOUNT_TEMPERATURE_ITEM = "mount_temperature"
CURRENT_LIMIT_ITEM = "current_limit"

#: The yes/no confirmations: item id -> question.
CONFIRMATIONS: Mapping[str, str] = MappingProxyType(
    {
        "beam_enclosed": "Is the beam path enclosed?",
        "beam_dumps": "Are beam dumps in place for every beam leaving the sample (transmitted and reflected)?",
        "warning_sign": "Is the laser warning sign or warning light at the entrance on?",
    }
)

#: Keys of the readings `evaluate` uses (`read_pump` fills them).
READ_INTERLOCK = "interlock_closed"
READ_MOUNT_TEMPERATURE = "mount_temperature"
READ_SETPOINT = "current_setpoint"
READ_CURRENT_LIMIT = "current_limit"

SECOND_LAYER_NOTICE = (
    "SECOND LAYER ONLY: gainbench's guard and this checklist are a software layer on top of the "
    "hardware interlock. They never replace the hardware interlock, your laser safety officer "
    "(LSO), ANSI Z136.1 / IEC 60825-1 or local rules. Follow your lab's procedures whatever this "
    "software says."
)

#: Wavelengths closer than this count as the same wavelength (eyewear item ids are in 0.1 nm).
_SAME_WAVELENGTH_NM = 0.05


@dataclass(frozen=True)
class Item:
    """One step of the checklist.

    Attributes
    ----------
    id : str
        Stable key of the answer (``"interlock"``, ``"eyewear@940nm"``, ``"beam_dumps"``, ...).
    prompt : str
        The question or the statement checked.
    kind : str
        ``"check"`` (read from the driver and the bench file, not asked), ``"confirm"`` (yes/no)
        or ``"eyewear"`` (the operator enters their eyewear's OD at ``wavelength``).
    wavelength : float or None
        m, eyewear items only.
    required_od : int or None
        Eyewear items: the OD needed (None when it could not be computed: arming is refused).
    note : str
        Shown under the prompt: how the OD was found, the caution.
    limits : mapping
        Check items: the limits from the bench file (K or A).
    lasers : tuple of str
        Eyewear items: which lasers (``"pump"``, ``"probe"``) emit at this wavelength.
    """

    id: str
    prompt: str
    kind: str
    wavelength: float | None = None
    required_od: int | None = None
    note: str = ""
    limits: Mapping[str, float] = field(default_factory=lambda: MappingProxyType({}))
    lasers: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise ValueError(f"kind: {self.kind!r} is not one of {', '.join(KINDS)}")


@dataclass(frozen=True)
class Answer:
    """One answer: the value given, when (run clock, s; None = when evaluated), by whom, how."""

    value: Any
    t: float | None = None
    who: str | None = None
    via: str = ""


@dataclass(frozen=True)
class Unreadable:
    """A reading that could not be taken from the driver, with why."""

    detail: str


@dataclass(frozen=True)
class ChecklistResult:
    """The verdict of the arming checklist.

    ``token`` is unique per evaluation: the guard accepts each result for one arming only.
    ``completed_at`` is the run-clock time of the evaluation.
    """

    passed: bool
    refusals: list[str]
    records: list[Event]
    operator: str
    completed_at: float
    token: str


def eyewear_id(wavelength: float) -> str:
    """Item id of the eyewear question at ``wavelength`` (m): ``"eyewear@976nm"`` (0.1 nm steps)."""
    if (
        isinstance(wavelength, bool)
        or not isinstance(wavelength, (int, float))
        or not (math.isfinite(wavelength) and wavelength > 0)
    ):
        raise ValueError(f"wavelength: expected a positive wavelength in m, got {wavelength!r}")
    return f"eyewear@{round(wavelength * 1e9, 1):g}nm"


# --------------------------------------------------------------------------------------------
# The items of a bench


def checklist_items(cfg: BenchConfig) -> list[Item]:
    """The checklist for one bench (the simulated bench gets the same questions)."""
    if not isinstance(cfg, BenchConfig):
        raise ValueError(f"cfg: expected a BenchConfig, got {type(cfg).__name__}")
    items = [Item(INTERLOCK_ITEM, "The hardware interlock reads closed (read from the pump driver)", CHECK)]
    items.extend(_eyewear_items(cfg))
    items.extend(Item(key, question, CONFIRM) for key, question in CONFIRMATIONS.items())
    g, p = cfg.guard, cfg.pump
    items.append(
        Item(
            MOUNT_TEMPERATURE_ITEM,
            f"The mount temperature is within {_k(g.mount_temperature_min)} to {_k(g.mount_temperature_max)} "
            "(read from the pump driver)",
            CHECK,
            limits=MappingProxyType({"low": g.mount_temperature_min, "high": g.mount_temperature_max}),
        )
    )
    items.append(
        Item(
            CURRENT_LIMIT_ITEM,
            f"The pump current limit is at or below the diode's rating of {p.diode_current_rating:g} A "
            "(read from the pump driver and the bench file)",
            CHECK,
            limits=MappingProxyType(
                {
                    "rating": p.diode_current_rating,
                    "guard_max": g.max_current,
                    "pump_max": p.max_current,
                }
            ),
        )
    )
    return items


def _k(kelvin: float) -> str:
    return f"{kelvin:.2f} K ({kelvin - 273.15:.1f} degC)"


def _watts(power: float) -> str:
    return f"{power:.3g} W" if power >= 1.0 else f"{power * 1e3:.3g} mW"


def _eyewear_items(cfg: BenchConfig) -> list[Item]:
    lasers = [
        ("pump", cfg.pump.wavelength, cfg.pump.max_power, cfg.pump.beam_diameter, "at its maximum current"),
        ("probe", cfg.probe.wavelength, cfg.probe.power, cfg.probe.beam_diameter, ""),
    ]
    groups: list[list[tuple[str, float, float, float, str]]] = []
    for laser in lasers:
        for group in groups:
            if abs(group[0][1] - laser[1]) * 1e9 < _SAME_WAVELENGTH_NM:
                group.append(laser)
                break
        else:
            groups.append([laser])
    items = []
    for group in groups:
        wavelength = group[0][1]
        # Several lasers at one wavelength: their powers add, into the smallest beam (conservative).
        power = sum(g[2] for g in group)
        diameter = min(g[3] for g in group)
        names = tuple(g[0] for g in group)
        described = ", ".join(
            f"{g[0]} {_watts(g[2])}{(' ' + g[4]) if g[4] else ''}, {g[3] * 1e3:g} mm beam" for g in group
        )
        nm = wavelength * 1e9
        notes = []
        if cfg.probe.kind == "pulsed" and "probe" in names:
            notes.append(
                "The probe is pulsed: this OD is for its average power only; pulsed exposure "
                "needs a separate evaluation by your LSO."
            )
        try:
            need = laser_safety.required_od(wavelength, power, diameter)
        except laser_safety.OutOfRangeError as exc:
            od = None
            prompt = (
                f"Laser-safety eyewear at {nm:g} nm ({described}): gainbench cannot compute the OD "
                f"needed here ({exc.detail})"
            )
            notes.insert(
                0,
                "Arming is refused: this tool cannot check eyewear at this wavelength. Ask your "
                "laser safety officer.",
            )
        else:
            od = need.od_required
            prompt = (
                f"Laser-safety eyewear at {nm:g} nm ({described}): enter the OD your eyewear is rated "
                f"for at {nm:g} nm; required: OD {od} or more"
            )
            notes.insert(
                0,
                f"OD {need.od_exact:.2f} exact for {need.exposure_time:g} s of direct viewing "
                f"({need.standard}).",
            )
        notes.append(laser_safety.caution_text())
        items.append(
            Item(
                eyewear_id(wavelength),
                prompt,
                EYEWEAR,
                wavelength=wavelength,
                required_od=od,
                note="\n".join(notes),
                lasers=names,
            )
        )
    return items


# --------------------------------------------------------------------------------------------
# Readings


def read_pump(pump: Any) -> dict[str, object]:
    """Read the checklist's values from a pump driver; a failed read becomes an `Unreadable`.

    The current limit is read only if the driver offers ``current_limit()``.
    """
    readers: list[tuple[str, str]] = [
        (READ_INTERLOCK, "interlock_closed"),
        (READ_MOUNT_TEMPERATURE, "mount_temperature"),
        (READ_SETPOINT, "current_setpoint"),
    ]
    if callable(getattr(pump, "current_limit", None)):
        readers.append((READ_CURRENT_LIMIT, "current_limit"))
    out: dict[str, object] = {}
    for key, method in readers:
        try:
            out[key] = getattr(pump, method)()
        except Exception as exc:  # any driver failure: the check is then refused, never skipped
            out[key] = Unreadable(f"{type(exc).__name__}: {exc}")
    return out


# --------------------------------------------------------------------------------------------
# Judging


def _reading(readings: Mapping[str, object], key: str, what: str) -> tuple[object, str | None]:
    if key not in readings or readings[key] is None:
        return None, f"{what} was not read from the pump driver"
    value = readings[key]
    if isinstance(value, Unreadable):
        return None, f"could not read {what} from the pump driver ({value.detail})"
    return value, None


def _number(value: object) -> float | None:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    x = float(value)
    return x if math.isfinite(x) else None


def _check_interlock(item: Item, readings: Mapping[str, object]) -> tuple[bool, str, object]:
    value, why = _reading(readings, READ_INTERLOCK, "the interlock state")
    if why:
        return False, why, None
    if value is True:
        return True, "the hardware interlock reads closed", True
    return False, "the hardware interlock reads open: close it before arming", value


def _check_temperature(item: Item, readings: Mapping[str, object]) -> tuple[bool, str, object]:
    value, why = _reading(readings, READ_MOUNT_TEMPERATURE, "the mount temperature")
    if why:
        return False, why, None
    x = _number(value)
    low, high = item.limits["low"], item.limits["high"]
    if x is None:
        return False, f"the mount temperature reading {value!r} is not a number", value
    if low <= x <= high:
        return True, f"the mount temperature {_k(x)} is within its window", x
    side = "above" if x > high else "below"
    return False, f"the mount temperature {_k(x)} is {side} its window {_k(low)} to {_k(high)}", x


def _check_current(item: Item, readings: Mapping[str, object]) -> tuple[bool, str, object]:
    rating = item.limits["rating"]
    guard_max, pump_max = item.limits["guard_max"], item.limits["pump_max"]
    problems = []
    if guard_max > rating:
        problems.append(f"guard.max_current {guard_max:g} A is above the diode's rating {rating:g} A")
    if pump_max > rating:
        problems.append(f"pump.max_current {pump_max:g} A is above the diode's rating {rating:g} A")
    value, why = _reading(readings, READ_SETPOINT, "the current setpoint")
    setpoint = _number(value)
    if why:
        problems.append(why)
    elif setpoint is None:
        problems.append(f"the current setpoint reading {value!r} is not a number")
    elif setpoint > min(guard_max, pump_max):
        problems.append(
            f"the driver's current setpoint {setpoint:g} A is above the limit "
            f"{min(guard_max, pump_max):g} A of the bench file"
        )
    limit = None
    if READ_CURRENT_LIMIT in readings:
        value, why = _reading(readings, READ_CURRENT_LIMIT, "the driver's current limit")
        limit = _number(value)
        if why:
            problems.append(why)
        elif limit is None:
            problems.append(f"the driver's current limit reading {value!r} is not a number")
        elif limit > rating:
            problems.append(
                f"the driver's current limit {limit:g} A is above the diode's rating {rating:g} A; "
                "set it at or below the rating"
            )
    seen = {"setpoint": setpoint, "driver_limit": limit}
    if problems:
        return False, "; ".join(problems), seen
    return True, f"current limits at or below the diode's rating {rating:g} A", seen


_CHECKS: Mapping[str, Callable[[Item, Mapping[str, object]], tuple[bool, str, object]]] = MappingProxyType(
    {
        INTERLOCK_ITEM: _check_interlock,
        MOUNT_TEMPERATURE_ITEM: _check_temperature,
        CURRENT_LIMIT_ITEM: _check_current,
    }
)


def _judge_check(
    item: Item, answer: Answer | None, readings: Mapping[str, object]
) -> tuple[bool, str, object]:
    check = _CHECKS.get(item.id)
    if check is None:
        return False, f"no check is known for item {item.id!r}", None
    return check(item, readings)


def _judge_confirm(
    item: Item, answer: Answer | None, readings: Mapping[str, object]
) -> tuple[bool, str, object]:
    if answer is None:
        return False, f"not answered: {item.prompt}", None
    if answer.value is True:
        return True, f"confirmed: {item.prompt}", True
    if answer.value is False:
        return False, f"answered no: {item.prompt}", False
    return False, f"not a yes/no answer ({answer.value!r}): {item.prompt}", answer.value


def _judge_eyewear(
    item: Item, answer: Answer | None, readings: Mapping[str, object]
) -> tuple[bool, str, object]:
    nm = f"{item.wavelength * 1e9:g} nm" if item.wavelength else "this wavelength"
    if item.required_od is None:
        return (
            False,
            (
                f"the OD needed at {nm} could not be computed by this tool; eyewear there must be "
                "chosen with your laser safety officer"
            ),
            None if answer is None else answer.value,
        )
    if answer is None:
        return False, f"no eyewear OD given for {nm} (required: OD {item.required_od} or more)", None
    od = _number(answer.value)
    if od is None or od < 0:
        return False, f"the eyewear OD given for {nm} ({answer.value!r}) is not a number >= 0", answer.value
    if od < item.required_od:
        return (
            False,
            (
                f"eyewear OD {od:g} at {nm} is below the OD {item.required_od} required: use eyewear "
                f"rated OD {item.required_od} or more at {nm}"
            ),
            od,
        )
    return True, f"eyewear OD {od:g} at {nm} (OD {item.required_od} required)", od


_JUDGES = MappingProxyType({CHECK: _judge_check, CONFIRM: _judge_confirm, EYEWEAR: _judge_eyewear})


def judge_item(item: Item, answer: Answer | None, readings: Mapping[str, object]) -> tuple[bool, str, object]:
    """(passes, why, the value judged) of one item, by its kind."""
    return _JUDGES[item.kind](item, answer, readings)


def evaluate(
    items: Sequence[Item],
    answers: Mapping[str, Answer | object],
    readings: Mapping[str, object],
    operator: str,
    clock: Callable[[], float] = time.monotonic,
) -> ChecklistResult:
    """Judge the answers and the driver's readings; refuse arming unless everything is fine.

    Parameters
    ----------
    items : sequence of Item
        From `checklist_items`.
    answers : mapping
        Item id -> `Answer` (or a bare value: True/False for confirmations, a number for an
        eyewear OD). Check items need no answer.
    readings : mapping
        From `read_pump` (``interlock_closed``, ``mount_temperature``, ``current_setpoint`` and
        optionally ``current_limit``).
    operator : str
        Who answers; every record names them.
    clock : callable
        The run clock (the guard's clock): it dates answers given without a time and the result.

    Returns
    -------
    ChecklistResult
        ``passed`` is True only when no item refused. ``records`` holds one ``"checklist"``
        Event per item and one for the verdict.
    """
    if not items:
        raise ValueError("items: the checklist is empty")
    for item in items:
        if not isinstance(item, Item):
            raise ValueError(f"items: expected Item objects, got {type(item).__name__}")
    if not isinstance(answers, Mapping):
        raise ValueError(f"answers: expected a mapping of item id to answer, got {type(answers).__name__}")
    if not isinstance(readings, Mapping):
        raise ValueError(f"readings: expected a mapping, got {type(readings).__name__}")
    name = operator.strip() if isinstance(operator, str) else ""
    who = name or "unnamed"
    refusals: list[str] = []
    records: list[Event] = []
    if not name:
        refusals.append(
            "no operator named: the checklist needs the name of the person answering it (--operator NAME)"
        )
    known = {item.id for item in items}
    for key in answers:
        if key not in known:
            refusals.append(_unknown_answer(key, items))
    for number, item in enumerate(items, start=1):
        raw = answers.get(item.id)
        answer = raw if isinstance(raw, Answer) or raw is None else Answer(raw)
        ok, text, value = _JUDGES[item.kind](item, answer, readings)
        if ok and answer is not None and answer.who is not None and name and answer.who.strip() != name:
            ok, text = (
                False,
                f"{item.id} was answered by {answer.who!r}, but the checklist is run by {name!r}",
            )
        if not ok:
            refusals.append(text)
        t = answer.t if answer is not None and answer.t is not None else clock()
        records.append(
            Event(
                t=float(t),
                kind="checklist",
                text=f"{number}. {item.id}: {'ok' if ok else 'REFUSED'}: {text}",
                who=who,
                data=MappingProxyType(
                    {
                        "item": item.id,
                        "kind": item.kind,
                        "prompt": item.prompt,
                        "ok": ok,
                        "answer": _plain(value),
                        "required_od": item.required_od,
                        "wavelength_m": item.wavelength,
                        "via": "pump driver and bench file"
                        if item.kind == CHECK
                        else (answer.via if answer else ""),
                    }
                ),
            )
        )
    completed = float(clock())
    token = uuid.uuid4().hex
    passed = not refusals
    verdict = "passed" if passed else "refused: " + "; ".join(refusals)
    records.append(
        Event(
            t=completed,
            kind="checklist",
            text=f"arming checklist {verdict}",
            who=who,
            data=MappingProxyType({"passed": passed, "refusals": list(refusals), "token": token}),
        )
    )
    return ChecklistResult(passed, refusals, records, name, completed, token)


def _unknown_answer(key: str, items: Sequence[Item]) -> str:
    if key.startswith("eyewear@"):
        have = ", ".join(i.id.removeprefix("eyewear@") for i in items if i.kind == EYEWEAR) or "none"
        return (
            f"an eyewear OD was given for {key.removeprefix('eyewear@')}, but no laser on this bench has that "
            f"wavelength (lasers at: {have})"
        )
    return f"an answer was given for {key!r}, which is not on this checklist"


def _plain(value: object) -> object:
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    return repr(value)
