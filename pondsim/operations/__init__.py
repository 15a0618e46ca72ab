"""Stage 3, operations: a year of pond management for every member at once.

``harvest`` turns policies and season plans into rule arrays; ``crash`` draws culture
crashes; ``engine`` integrates density hour by hour with harvests, crashes and the biomass
ledger; ``simulate`` wires scenario -> forcing -> pond physics -> engine; ``dataset``
assembles the results Dataset (the results contract).
"""
