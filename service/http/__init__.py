"""What the routers share and that is not a router: callers and access, request dependencies, idempotency,
lookups with their 404s, pagination cursors, problem answers in OpenAPI, the result's CSV form."""
