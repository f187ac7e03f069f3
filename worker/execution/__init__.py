"""How a run's units are executed: the prefix tree per epoch set, the step cache, and the process pool or Dask cluster."""
