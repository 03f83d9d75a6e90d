"""Pure image computation for Beamledger: reading, metadata, sharpness, charging, physics.

Imports nothing from Django or the other apps, so it can run in a worker, a script or a notebook.
"""
