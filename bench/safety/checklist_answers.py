"""Answers to the arming checklist (`bench.safety.checklist`): from command-line flags for
headless runs (`answers_from_flags`, `parse_eyewear_flags`), or asked one at a time on a terminal
(`run_interactive`). Either way `bench.safety.checklist.evaluate` judges them.

The checklist is a second layer only: it never replaces the hardware interlock, the laser safety
officer, ANSI Z136.1 / IEC 60825-1 or local rules.
"""

from __future__ import annotations

import re
import time
from collections.abc import Callable, Mapping, Sequence

from bench.errors import ConfigError
from bench.safety import exposure_limits as laser_safety
from bench.safety.checklist import (
    CHECK,
    CONFIRM,
    CONFIRMATIONS,
    SECOND_LAYER_NOTICE,
    Answer,
    Item,
    eyewear_id,
    judge_item,
)
from bench.units import parse_quantity


def answers_from_flags(
    operator: str,
    eyewear_ods: Mapping[float, float],
    confirm_all: bool,
) -> dict[str, Answer]:
    """Answers from command-line flags, for headless use.

    Parameters
    ----------
    operator : str
        ``--operator NAME``; stamped on every answer.
    eyewear_ods : mapping of float to float
        Wavelength (m) -> the OD of the operator's eyewear there (``--eyewear-od 976nm=5``,
        repeatable; see `parse_eyewear_flag`).
    confirm_all : bool
        The operator confirms every yes/no item (beam enclosed, dumps, warning sign). When
        False those items stay unanswered and `evaluate` refuses arming.
    """
    if not isinstance(eyewear_ods, Mapping):
        raise ValueError(
            f"eyewear_ods: expected a mapping of wavelength (m) to OD, got {type(eyewear_ods).__name__}"
        )
    who = operator.strip() if isinstance(operator, str) else None
    answers: dict[str, Answer] = {}
    for wavelength, od in eyewear_ods.items():
        key = eyewear_id(wavelength)
        answers[key] = Answer(od, who=who or None, via=f"--eyewear-od {key.removeprefix('eyewear@')}={od}")
    if confirm_all:
        for key in CONFIRMATIONS:
            answers[key] = Answer(True, who=who or None, via="confirmed on the command line")
    return answers


#: An OD as printed on eyewear: ASCII digits with at most one decimal point, nothing else
#: (Python's float would also take "5_0" as 50, "٥" as 5, "1e1", "inf" and "nan").
_OD_NUMERAL = re.compile(r"[0-9]{1,3}(?:\.[0-9]{0,3})?|\.[0-9]{1,3}")

#: No eyewear is rated above this (EN 207 scale numbers stop at LB10, from memory): a larger
#: figure is a typing mistake.
OD_MAX = 10.0


def parse_od(text: str) -> float:
    """An eyewear OD as typed (``"5"``, ``"4.5"``); ValueError saying what is wrong otherwise."""
    t = str(text).strip()
    if not _OD_NUMERAL.fullmatch(t):
        raise ValueError(
            f"the OD {t!r} is not a plain number such as 5 or 4.5 (ASCII digits, no underscores, no exponent)"
        )
    od = float(t)
    if od > OD_MAX:
        raise ValueError(f"the OD {t!r} is above OD {OD_MAX:g}, more than any eyewear is rated for")
    return od


def parse_eyewear_flag(text: str) -> tuple[float, float]:
    """``"976nm=5"`` -> ``(9.76e-7, 5.0)``; a `ConfigError` naming ``--eyewear-od`` otherwise."""
    where = f"--eyewear-od {text!r}"
    left, sep, right = str(text).partition("=")
    if not sep or not left.strip() or not right.strip():
        raise ConfigError(f"{where}: expected WAVELENGTH=OD, e.g. 976nm=5")
    if "=" in right:
        raise ConfigError(f"{where}: expected one WAVELENGTH=OD, e.g. 976nm=5 (repeat the option for more)")
    wavelength = parse_quantity(left.strip(), "length", where)
    try:
        od = parse_od(right)
    except ValueError as exc:
        raise ConfigError(f"{where}: {exc}") from None
    if not wavelength > 0:
        raise ConfigError(f"{where}: the wavelength must be positive")
    return wavelength, od


def parse_eyewear_flags(items: Sequence[str]) -> dict[float, float]:
    """Every ``--eyewear-od`` given -> wavelength (m) -> OD; each wavelength once.

    The same wavelength named twice (``940nm=0`` and ``940nm=5``, or ``940nm`` and ``0.94um``,
    which are one eyewear item) is refused, whether the ODs agree or not: which answer the
    operator meant cannot be guessed, and the safe-looking one must not win silently.
    """
    ods: dict[float, float] = {}
    given: dict[str, str] = {}
    for item in items:
        wavelength, od = parse_eyewear_flag(item)
        key = eyewear_id(wavelength)
        if key in given:
            raise ConfigError(
                f"--eyewear-od {item!r}: {key.removeprefix('eyewear@')} was already answered by --eyewear-od "
                f"{given[key]!r}; give each wavelength once, with the OD printed on the eyewear worn"
            )
        given[key] = str(item)
        ods[wavelength] = od
    return ods


def run_interactive(
    items: Sequence[Item],
    input_fn: Callable[[str], str] = input,
    print_fn: Callable[[str], None] = print,
    *,
    operator: str,
    readings: Mapping[str, object] | None = None,
    clock: Callable[[], float] = time.monotonic,
    title: str | None = None,
    max_retries: int = 5,
) -> dict[str, Answer]:
    """Ask the items one at a time on a terminal; returns the answers for `evaluate`.

    Check items are shown with their reading (when ``readings`` is given), not asked. Asking
    stops at the first answer that refuses arming (a "no", an eyewear rating too low), at
    end of input, or after ``max_retries`` unusable replies to one question.
    """
    who = operator.strip() if isinstance(operator, str) else ""
    if not who:
        raise ValueError("operator: name the person answering the checklist")
    print_fn(title or "Arming checklist for the pump laser")
    print_fn(SECOND_LAYER_NOTICE)
    print_fn(laser_safety.caution_text())
    answers: dict[str, Answer] = {}
    total = len(items)
    for number, item in enumerate(items, start=1):
        head = f"[{number}/{total}]"
        if item.kind == CHECK:
            if readings is None:
                print_fn(f"{head} {item.prompt}: checked from the pump driver when arming")
            else:
                ok, text, _ = judge_item(item, None, readings)
                print_fn(f"{head} {item.prompt}: {'ok' if ok else 'REFUSED'}: {text}")
            continue
        if item.note:
            print_fn(item.note)
        reply = _ask(item, head, input_fn, print_fn, max_retries)
        if reply is None:
            print_fn("No usable answer: arming will be refused.")
            return answers
        answers[item.id] = Answer(reply, t=float(clock()), who=who, via="terminal")
        ok, text, _ = judge_item(item, answers[item.id], {})
        if not ok:
            print_fn(f"Arming will be refused: {text}")
            return answers
    return answers


def _ask(
    item: Item, head: str, input_fn: Callable[[str], str], print_fn: Callable[[str], None], max_retries: int
) -> bool | float | None:
    question = f"{head} {item.prompt} [yes/no] " if item.kind == CONFIRM else f"{head} {item.prompt}\n  OD: "
    for _ in range(max_retries):
        try:
            text = input_fn(question).strip().lower()
        except EOFError:
            return None
        if item.kind == CONFIRM:
            if text in ("y", "yes"):
                return True
            if text in ("n", "no"):
                return False
            print_fn("Please answer yes or no.")
            continue
        try:
            return parse_od(text)
        except ValueError as exc:
            print_fn(
                f"{str(exc)[0].upper()}{str(exc)[1:]}. Please enter the OD printed on your eyewear for "
                "this wavelength, a number such as 5."
            )
    return None
