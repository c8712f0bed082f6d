"""Treewright's parsing library: bracketed trees, PCFG estimation, chart parsing, scoring.

This package never imports from ``app``; it takes and returns plain data.
"""

#: Marks this package as Treewright's parser (the CLI refuses a different ``parser`` module that
#: would shadow it on sys.path).
IS_TREEWRIGHT_PARSER = True
