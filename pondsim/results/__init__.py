"""Stage 4, results: what a run hands to people and tools.

``tables`` summarises a results Dataset and the forcing; ``figures`` draws them; ``files``
writes netCDF and CSV whole or not at all.
"""
