"""The safety cautions popmeter shows, written once.

A running boat means an open flame, a hot boiler and steam, often with
children around and mains-powered equipment near water. Every output that
accompanies a run (the terminal at the start of a capture, the model report,
the one-run and batch reports) carries one of these texts. popmeter measures;
it never certifies safety, and it defers to local codes and toy-safety
regulations.
"""

#: One line for the terminal.
SAFETY_LINE = (
    "Caution: open flame, hot boiler and steam. Supervise children; keep mains-powered "
    "equipment away from the water. Follow local codes and toy-safety regulations; "
    "popmeter measures, it does not certify safety."
)

#: The longer note for HTML reports (plain text; escape it when embedding).
SAFETY_NOTE = (
    "Running a boat means an open flame, a hot boiler and steam: test over a non-flammable "
    "tray, keep water and spills away from mains-powered equipment, let the boiler cool before "
    "touching it, and keep children supervised and away from the flame. Follow your local "
    "codes and toy-safety regulations. popmeter measures sound; it does not certify that a "
    "boat is safe."
)
