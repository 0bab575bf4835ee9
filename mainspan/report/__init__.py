"""The review report and its plots: each takes a :class:`mainspan.pipeline.layout.Layout`."""
