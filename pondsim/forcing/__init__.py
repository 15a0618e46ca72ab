"""Stage 1, forcing: hourly weather for the site in local standard time.

``weather`` reads a weather file (one reader per format in ``formats``) into the forcing
table whose columns, units and ranges ``columns`` declares; ``solar`` adds the sun's
position and clear-sky irradiance; ``climate`` makes clear-sky weather from monthly
normals (and the EPW-writing command), ``synthetic`` day-to-day synthetic weather;
``years`` splits multi-year records and generates weather years; ``psychrometry`` holds
the FAO-56 relations; ``epw_writer`` writes EPW files.
"""
