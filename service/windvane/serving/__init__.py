"""The HTTP service: the lookup fast path, the lookup service, the routes and their state."""
