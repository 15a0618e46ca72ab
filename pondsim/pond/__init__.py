"""Stage 2, pond physics: what the weather does to the culture.

``light`` gives the PAR entering the culture; ``thermal`` the water temperature,
evaporation and makeup water from the pond's energy balance (with ``transfer``, the
surface heat and vapour transfer models, ``longwave``, the sky longwave, and
``thermal_step``, the hourly integration); ``kinetics`` the growth and
maintenance rates from light and temperature; ``capacity`` the daily carrying capacity K.
"""
