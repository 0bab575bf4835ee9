"""Writers: each takes a :class:`mainspan.layout.Layout` and nothing else."""
