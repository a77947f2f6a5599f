"""popmeter: measure popping-diaphragm steam boat engines from their sound.

The pipeline, one module per step (see DEVELOPERS.md):

    audio_io -> detection -> timeline -> stiffness (with profile, engine, plate)
             -> analysis -> qc_spec / batch / history

Everything inside works in SI units.
"""

__version__ = "0.1.0"
