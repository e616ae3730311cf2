"""Default sizes of a separation, in one place for the library and the command line.

No imports: ``quantize separate --help`` shows them without loading numpy.
All are common practice, no source; set them from the shop's screen mesh,
emulsion and ink.
"""

__all__ = ["DEFAULT_CHOKE_MM", "DEFAULT_DPI", "DEFAULT_FILM_DPI", "DEFAULT_HIGHLIGHT_MIN_L", "DEFAULT_KEEP_FRACTION", "DEFAULT_MARGIN_MM", "DEFAULT_MIN_FEATURE_MM", "DEFAULT_MIN_LINE_MM",
           "DEFAULT_TRAP_MM", "DEFAULT_LPI", "DEFAULT_MIN_DOT_MM", "DEFAULT_INDEX_DPI", "DEFAULT_VIEW_DISTANCE_MM"]

#: Smallest printable dot diameter, mm (common practice, no source).
DEFAULT_MIN_FEATURE_MM = 0.5
#: Thinnest printable line or knock-out gap, mm; about 1 pt (common practice, no source).
DEFAULT_MIN_LINE_MM = 0.35
#: How far the underbase is pulled in from the edges of the print, mm (common practice, no source).
DEFAULT_CHOKE_MM = 0.25
#: Resolution assumed when the image records none (common practice, no source).
DEFAULT_DPI = 300.0
#: Margin around the artwork for registration marks and the label, mm.
DEFAULT_MARGIN_MM = 10.0
#: Film resolution, dpi: fine enough that a film pixel (0.042 mm) is well below any printable
#: detail on a screen (common practice, no source).
DEFAULT_FILM_DPI = 600.0
#: Inks at least this light (L*) are printed again by the highlight white; a starting point, no source.
DEFAULT_HIGHLIGHT_MIN_L = 85.0
#: Trap width, mm: how far a lighter ink spreads under a darker one where they meet
#: (common practice, from memory: a few tenths of a millimetre or less; set it from the press's registration).
DEFAULT_TRAP_MM = 0.15
#: Small elements of at least this fraction of the minimum dot's area are grown to it, smaller ones
#: dropped whole; a starting point, no source.
DEFAULT_KEEP_FRACTION = 0.5
#: Halftone screen frequency, lines per inch (common practice, from memory: textile halftones are
#: usually 45 to 65 lpi).
DEFAULT_LPI = 55.0
#: The smallest halftone dot (and hole) a screen holds, diameter in mm (common practice, from memory;
#: set it from the mesh and emulsion).
DEFAULT_MIN_DOT_MM = 0.1
#: Index separation resolution, dpi: square index pixels of 0.127 mm (common practice, from memory).
DEFAULT_INDEX_DPI = 200.0
#: Viewing distance of the perceived error, mm: a printed garment or poster seen from about a metre
#: (a stated assumption, no source).
DEFAULT_VIEW_DISTANCE_MM = 1000.0
