"""The offline HTML report: the page, its SVG drawings (palette strips, hue wheels) and the
floor/rug/furniture contrast cautions.

May import everything below it (colour, photo, shop, rules, suggest); never the evaluation's
computations (only its finished result objects), the demo or the command line.
"""
