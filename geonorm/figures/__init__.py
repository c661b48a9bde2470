"""Per-country figures: tallies, population, intervals and rates, the map."""
