"""Ground: rasters, link profiles, link costs and cost expressions."""
