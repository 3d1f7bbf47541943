"""Products of a study: figures, the appendix (HTML, PDF), text summaries, run and comparison
folders, the demo files.
"""
