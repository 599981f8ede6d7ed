"""Report: the document model, its HTML and PDF renderers, the charts and the output files.

May import: every package above it (up to ``blendq.decide``); never ``blendq.api`` or the CLI.
"""
