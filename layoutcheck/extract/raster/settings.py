"""Settings of the raster extractor."""

from __future__ import annotations

from dataclasses import dataclass, field

from ..assemble import AssemblySettings


@dataclass(frozen=True)
class RasterSettings:
    """How a scanned page is read. Sizes are in mm (never pixels), so 200 and 300 dpi agree."""

    #: Resolution at which rules and text are *detected* (fits are always made on the original).
    #: 150 dpi keeps a 0.2 mm rule (0.6 point) and cuts the work of detection by 4 at 300 dpi.
    detect_dpi: float = 150.0
    #: Largest page skew searched, degrees (modulo 90: a page turned by 90 degrees is skew 0).
    max_skew_deg: float = 10.0
    #: Shortest run the openings keep, mm: a small checkbox's side (3 mm) with its stroke, longer
    #: than the straight strokes of text up to about 14 pt (common practice: the cap height of
    #: 10 pt text is about 2.5 mm).
    min_rule_mm: float = 3.0
    #: Runs at least this long are rules whatever meets them; shorter runs must meet crossing
    #: runs at both ends (the sides of a checkbox), which the strokes of text do not, mm. It is
    #: also the shortest rule reported on its own (shorter ones only as sides of boxes).
    long_rule_mm: float = 8.0
    #: How far a short run may overshoot the crossing run it meets, mm: a stroke's width, or
    #: a tick that runs over a checkbox's corner (its 0.5 mm stroke, blurred, carries the run on
    #: by up to 1.2 mm).
    corner_reach_mm: float = 1.5
    #: Largest deviation (1.25 mean absolute residual) of a short rule's centre from a straight
    #: line, mm: a printed rule stays under 0.05 mm, a tick-crossed checkbox side under 0.12.
    straight_mm: float = 0.2
    #: Thickest ink run still taken as a rule, mm; thicker runs are bars, blobs or shadows.
    max_rule_width_mm: float = 1.5
    #: Side of the Sauvola window, mm (a few character heights).
    sauvola_window_mm: float = 8.0
    #: Sauvola's k and dynamic range R (Sauvola and Pietikainen 2000: k = 0.5, R = 128 for grey
    #: documents; k = 0.2 is the common practice for printed forms with thin rules).
    sauvola_k: float = 0.2
    sauvola_r: float = 128.0
    #: Background spread (grey levels, see :func:`background_spread`) above which the local
    #: method is used: an evenly lit scan spreads by under 15 levels.
    uniform_background: float = 30.0
    #: A closed outline whose inside is under this many times the width of its sides is a
    #: letter's counter, not a box (measured on Helvetica-Bold at 14-40 pt, scanned at 150-300
    #: dpi: counters and bowls under 2.5; a 4 mm checkbox of 0.35 mm rules about 10, a 3 mm one
    #: of 0.5 mm rules 5).
    min_box_inside: float = 3.5
    #: Boxes smaller than this on both sides are letters' counters too, mm (common practice:
    #: checkboxes are 3 to 5 mm; the counter of a 14 pt letter is under 2 mm).
    min_box_mm: float = 2.2
    #: A connected piece of ink larger than this on either side is no letter, mm (type of up to
    #: about 40 pt: capitals of 10 mm, common practice).
    max_letter_mm: float = 12.0
    #: A piece of ink with at least this share of it off a box candidate's four sides is more
    #: than the candidate's outline (a letter around its counter, see ``glyph_outlines``).
    letter_off_outline: float = 0.15
    #: A box candidate with sides over this share of its inside is drawn heavy for a box: the
    #: stroke of a letter is a tenth of its height and more (common practice: Helvetica's is
    #: about 0.09 em, its bold 0.14 em); a checkbox's rules are a few hundredths of its side.
    letter_stroke: float = 0.1
    #: Components smaller than this on both sides are speckle, mm.
    speckle_mm: float = 0.3
    #: Components larger than this on either side are not printed characters, mm.
    max_glyph_mm: float = 15.0
    #: A component at most the first this thick and at least the second long, mm, is a piece of
    #: a rule (a thin rule that a coarse scan broke into dashes), not a character: letters of
    #: print are taller than 1 mm and a hyphen is shorter than 3 mm (common practice: type of
    #: 6 pt and up has capitals over 1.5 mm tall).
    rule_piece_mm: tuple[float, float] = (0.8, 3.0)
    #: A solid square with a side in this range is a registration mark, mm.
    mark_side_mm: tuple[float, float] = (2.5, 12.0)
    #: Ink within this distance of the image border is left out (scanner edges and shadows), mm.
    border_mm: float = 1.0
    #: Words are joined into one label across gaps up to this many character heights.
    word_gap: float = 1.0
    #: Assembly of rules into boxes (shared with the vector extractor).
    assembly: AssemblySettings = field(default_factory=AssemblySettings)
