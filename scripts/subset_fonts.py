"""Subsets the embedded DejaVu Sans fonts for the HTML report.

The month report embeds its fonts so the browser lays text out with the font the charts were
measured with; the whole DejaVu Sans (two weights, 1.9 MB as base64) made every report at least
2 MB. The report needs Latin text, digits, punctuation and a few symbols; other characters (a
plant name in another script) fall back to the browser's fonts. Writes
assets/fonts/DejaVuSans-report.ttf and DejaVuSans-Bold-report.ttf (the chart renderer keeps the
full fonts). Run: pip install fonttools && python3 scripts/subset_fonts.py
"""
import fontTools
from fontTools import subset

UNICODES = (
    "U+0020-007E,"    # ASCII
    "U+00A0-017F,"    # Latin-1 Supplement, Latin Extended-A (umlauts, accents, µ, ×, °, ±)
    "U+0391-03C9,"    # Greek (eta, omega, sigma, alpha in method names)
    "U+2010-2027,"    # dashes, quotes, bullet, ellipsis
    "U+2030,U+2032,U+2033,"  # per mille, primes
    "U+2190-2193,"    # arrows (limits beyond a chart's value axis)
    "U+2212,U+2248,U+2260,U+2264,U+2265,U+221A,U+221E,"  # minus, approx, not equal, <=, >=, root, infinity
    "U+25A0-25CF"     # geometric shapes (markers in text)
)

for name in ["DejaVuSans", "DejaVuSans-Bold"]:
    options = subset.Options()
    options.layout_features = ["kern", "liga"]
    options.name_IDs = ["*"]
    options.notdef_outline = True
    font = subset.load_font(f"assets/fonts/{name}.ttf", options)
    subsetter = subset.Subsetter(options)
    subsetter.populate(unicodes=subset.parse_unicodes(UNICODES))
    subsetter.subset(font)
    subset.save_font(font, f"assets/fonts/{name}-report.ttf", options)
    print(name, "subset with fontTools", fontTools.version)
