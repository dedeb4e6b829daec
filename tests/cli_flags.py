"""Command-line flags shared by the tests that record runs through `gainbench record`."""

#: Arming answers for the simulated bench (eyewear OD at the pump's 940 nm and the probe's
#: 1030 nm, setup confirmed). A loaded test machine may stall a reader for longer than the demo
#: bench's 0.5 s: these tests are about the run, not about stale-reading trips (those are in
#: tests/safety/test_guard_on_bench.py), so the limit is raised to 2 s.
ARM = [
    "--operator",
    "tester",
    "--eyewear-od",
    "940nm=5",
    "--eyewear-od",
    "1030nm=2",
    "--confirm-setup",
    "--set",
    "guard.stale_after=2s",
]
