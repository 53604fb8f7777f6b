"""Control: the typed reading and reference, link references, the laws (vector form), the safety
filter, the watchdog, and the controllers (law + per-joint safety, switching, ramps)."""
