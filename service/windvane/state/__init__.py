"""The plan's two paths through the store: the update router and script, and the lookup reader."""
