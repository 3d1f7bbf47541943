"""Studies compose the stages into results (run, ensemble, compare, check, inspect); they write
no files.
"""
