"""Stage 5, studies: questions answered with many runs.

``compare`` ranks policies by season; ``tune`` searches the harvest plan per season;
``outlook`` gives P50/P90 yields over weather years and parameter draws, with
``uncertainty`` drawing parameters and computing Sobol indices; ``inputs_bill`` prices what
the ponds consume; ``calibrate`` (modules ``fit_*``) fits growth parameters to pilot
data; ``crash_*`` fit the crash hazard to a site's pond log; ``screen`` runs many
sites.
"""
