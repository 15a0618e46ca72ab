"""Stage 2, pond physics: what the weather does to the culture.

``light`` gives the PAR entering the culture; ``thermal`` the water temperature,
evaporation and makeup water from the pond's energy balance (with ``transfer``, the
surface heat and vapour transfer models, ``longwave``, the sky longwave,
``thermal_step``, the hourly integration, and ``stress``, hours beyond the strain's
cardinal temperatures); ``light_response`` the growth response to light in a
self-shading culture; ``kinetics`` the growth and
maintenance rates from light and temperature; ``capacity`` the daily carrying capacity K.
"""
