"""Server-side plots of a finished job: traces, rank histograms, densities, pair scatter (SVG)."""
