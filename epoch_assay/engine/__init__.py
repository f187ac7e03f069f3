"""Pure computation on epoch arrays: no HTTP, no database, no files but those handed in.

Internal units are SI (V, s, Hz). Microvolts appear only where users give thresholds
or read results, converted by :mod:`epoch_assay.engine.units`.
"""
