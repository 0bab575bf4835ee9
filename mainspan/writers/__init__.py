"""Writers: each takes a :class:`mainspan.pipeline.layout.Layout` and nothing else."""
