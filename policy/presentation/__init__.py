"""Presentation only: figures, the committee report and the command line.

Stage 6, the last: assembles result objects into files, pages and terminal text and computes
nothing of its own. May import every other part of the package; nothing imports it except
``policy/__init__`` and ``policy/__main__``.
"""
