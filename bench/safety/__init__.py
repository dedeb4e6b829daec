"""The software guard (a second layer only: it never replaces a hardware interlock): guard states, the guarded pump, trip conditions, the arming checklist, exposure limits."""
