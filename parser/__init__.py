"""Treewright's parsing library: bracketed trees, PCFG estimation, chart parsing, scoring.

This package never imports from ``app``; it takes and returns plain data.
"""
