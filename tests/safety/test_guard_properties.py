"""Property tests of bench.safety.guard: random sequences of events never lead to emission without a
passed checklist after the last trip or disarm.

The model below is written from the rules (ANSI Z136.1 section 4: deliberate action and
interlocks before class 3B / 4 emission, from memory; IEC 60204-1 9.2.3.4: a reset does not
restart, from memory), not from the table in bench.safety.guard.
"""

from __future__ import annotations

import uuid

from hypothesis import given, settings
from hypothesis import strategies as st

from bench.safety import guard as g
from bench.safety.checklist import ChecklistResult

CONDITIONS = ("interlock_open", "mount_temperature", "stale.detector")
WHO = st.sampled_from(["ana", "", "bo"])

OPS = st.one_of(
    st.tuples(st.just("arm"), st.booleans(), st.floats(-20.0, 1500.0), st.booleans(), WHO),
    st.tuples(st.just("emit"), WHO),
    st.tuples(st.just("stop")),
    st.tuples(st.just("disarm")),
    st.tuples(st.just("start")),
    st.tuples(st.just("shutdown")),
    st.tuples(st.just("trip"), st.sampled_from(CONDITIONS)),
    st.tuples(st.just("clear"), st.sampled_from(CONDITIONS)),
    st.tuples(st.just("ack"), WHO),
)
STEPS = st.lists(st.tuples(OPS, st.floats(0.0, 400.0)), max_size=80)


@settings(max_examples=400, deadline=None)
@given(STEPS)
def test_random_sequences_never_emit_without_a_fresh_passed_checklist(steps):
    guard = g.Guard()
    now = 0.0
    last_reset = -float("inf")
    armed_validly = False
    used_tokens: set[str] = set()
    previous: ChecklistResult | None = None
    for op, dt in steps:
        now += dt
        name = op[0]
        result = None
        if name == "arm":
            _, ok, age, reuse, who = op
            if reuse and previous is not None:
                result = previous
            else:
                result = ChecklistResult(
                    ok, [] if ok else ["refused"], [], "ana", now - age, uuid.uuid4().hex
                )
                previous = result
            event = g.Arm(result, who)
        elif name == "emit":
            event = g.Emit(op[1])
        elif name == "stop":
            event = g.StopEmission()
        elif name == "disarm":
            event = g.Disarm()
        elif name == "start":
            event = g.Start()
        elif name == "shutdown":
            event = g.Shutdown()
        elif name == "trip":
            event = g.Trip("something failed", op[1], now)
        elif name == "clear":
            event = g.ConditionCleared(op[1])
        else:
            event = g.Acknowledge(op[1])
        before = guard.state
        out = guard.handle(event, now)

        # Every handled event is recorded with its states.
        assert out.event.data["from"] == before and out.event.data["to"] == guard.state == out.after
        assert out.event.t == now

        if name in ("trip", "disarm", "start", "shutdown"):
            assert out.accepted  # off requests are never refused
            last_reset = now
            armed_validly = False
        if name == "arm" and out.accepted:
            assert result is not None and result.passed is True
            assert last_reset <= result.completed_at <= now
            assert result.token not in used_tokens
            used_tokens.add(result.token)
            armed_validly = True
        if g.PumpOn() in out.actions:
            assert before == g.ARMED and name == "emit" and op[1].strip()
        if before == g.TRIPPED and guard.state != g.TRIPPED:
            assert name == "ack" and guard.state == g.SAFE  # the only way out, and never to emitting
        if guard.state == g.EMITTING:
            assert armed_validly
        if guard.state in (g.SAFE, g.TRIPPED):
            assert g.PumpOn() not in out.actions
