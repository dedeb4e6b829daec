"""The terminal dashboard (textual): a live measurement or a stored run on one screen.

- `live_app.LiveDashboard` drives a `bench.run.measurement.Measurement` (`gainbench live`);
  `replay_app.ReplayDashboard` shows a stored run through `replay_feed.ReplayFeed`
  (`gainbench replay RUN`, entry point `replay_app.run_replay_dashboard`).
- `base_app.DashboardBase` holds what both share: the layout (``dashboard.tcss``) and the
  snapshot timer. The pipeline never waits for the screen: the timer reads
  `bench.run.consumer.Snapshot` objects; procedures run in thread workers.
- Panels, one small widget each: `guard_panel`, `pump_panel`, `run_panel`, `figures_panel`,
  `health_panel`, `events_panel`, `replay_panel`, `banner` (and the action line), `plots`.
- Modal screens: `checklist_screen` (arming), `trip_screen`, `mode_screen`, `small_screens`
  (keys, note, quit).
- Plain helpers without widgets: `format` (wording), `meters` (repaint rate, reading-to-screen
  latency), `stats_poller` (instrument counters read off the event loop).

The guard shown here is a second layer only: it never replaces the hardware interlock, the
laser safety officer, ANSI Z136.1 / IEC 60825-1 or local rules.
"""
