"""Operations of the service that span several tables (queue a run, lock a pipeline, store an upload and
score it on arrival, delete an epoch set with its blobs); routers call these, and these call the storage layer."""
