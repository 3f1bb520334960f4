"""Getting events in: log files and replay, the event stream and its workers, their freshness."""
