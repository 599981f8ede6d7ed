"""Charts: matplotlib drawings of an analysis, imported lazily (the core never imports them).

May import: the packages above ``blendq.report``, and ``blendq.report.document``.
"""
