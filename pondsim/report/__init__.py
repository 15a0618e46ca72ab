"""Stage 6, report: one self-contained HTML page built from a study's outputs."""
