"""The READ-01 demo: simulated epoch sets with a known effect, and a loader that sends them to a server."""
