"""Analysts' side: queries, exports, comparisons and the command line, against a live server."""
