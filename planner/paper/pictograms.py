"""GHS hazard pictograms as small inline SVG, drawn here (our own simplified drawings).

The GHS pictograms are a red-bordered square set on a point (a diamond) holding a black symbol on a
white ground [source: UN GHS Rev. 9 (2021) §1.4.10.5.2 and Annex 3 §A3.4; CLP Annex V]. The nine
symbols are the exploding bomb (GHS01), flame (GHS02), flame over circle (GHS03), gas cylinder
(GHS04), corrosion (GHS05), skull and crossbones (GHS06), exclamation mark (GHS07), health hazard
(GHS08) and environment (GHS09). These drawings are simplified and recognisable, not the official
artwork; the supplier's label and SDS remain the reference.

Each SVG is a pure function of its code (no ids, no randomness), so sheets stay byte-identical.
"""

from __future__ import annotations

__all__ = ["BORDER_RED", "SYMBOLS", "pictogram_svg"]

BORDER_RED = "#e3000f"
"""Border colour: GHS asks for a red frame wide enough to be clearly visible [source: UN GHS §1.4.10.5.2]."""
INK = "#000000"

# Flame outline (a path in the 100 × 100 box), reused by GHS02 and GHS03 at different places.
_FLAME = (
    "M50 22 C58 33 67 40 64 54 C62 62 56 66 50 66 C42 66 36 60 37 51 C38 44 44 41 44 33 "
    "C48 37 50 41 49 46 C53 42 54 32 50 22 Z"
)

SYMBOLS: dict[str, str] = {
    # exploding bomb: a round bomb blowing apart, with fragments and rays
    "GHS01": (
        '<circle cx="44" cy="60" r="11" fill="{ink}"/>'
        '<path d="M52 50 L57 45" stroke="{ink}" stroke-width="3"/>'
        '<g stroke="{ink}" stroke-width="3" stroke-linecap="round">'
        '<path d="M60 40 L66 31"/><path d="M64 46 L74 42"/><path d="M55 36 L56 27"/>'
        '<path d="M66 54 L74 56"/><path d="M48 31 L46 25"/></g>'
        '<g fill="{ink}"><circle cx="70" cy="36" r="2.5"/><circle cx="62" cy="28" r="2"/>'
        '<circle cx="72" cy="49" r="2"/><circle cx="34" cy="44" r="2"/></g>'
    ),
    # flame over a horizontal bar
    "GHS02": (
        f'<path d="{_FLAME}" fill="{{ink}}"/><rect x="34" y="69" width="32" height="4" fill="{{ink}}"/>'
    ),
    # flame over circle: a flame rising out of a ring, over a bar
    "GHS03": (
        '<path d="M50 24 C56 32 62 37 60 47 C59 51 56 53 53 54 L47 54 C43 53 40 50 40 45 C41 40 45 37 45 31 '
        'C48 34 49 37 49 41 C52 37 52 31 50 24 Z" fill="{ink}"/>'
        '<circle cx="50" cy="60" r="8" fill="none" stroke="{ink}" stroke-width="4"/>'
        '<rect x="34" y="71" width="32" height="4" fill="{ink}"/>'
    ),
    # gas cylinder lying on its side, valve to the right
    "GHS04": (
        '<rect x="27" y="47" width="40" height="15" rx="7" fill="{ink}"/>'
        '<rect x="67" y="51" width="5" height="7" fill="{ink}"/>'
        '<rect x="72" y="49" width="3" height="11" fill="{ink}"/>'
    ),
    # corrosion: two tubes pouring drops onto a surface (bitten) and onto a hand (bitten)
    "GHS05": (
        '<g fill="{ink}"><path d="M27 27 L31 22 L45 33 L41 38 Z"/><path d="M73 27 L69 22 L55 33 L59 38 Z"/>'
        '<circle cx="40" cy="43" r="2"/><circle cx="40" cy="50" r="2"/>'
        '<circle cx="60" cy="43" r="2"/><circle cx="60" cy="50" r="2"/>'
        '<path d="M26 56 L46 56 L46 64 L41 64 L39 60 L36 64 L26 64 Z"/>'
        '<path d="M54 56 L74 56 L74 64 L63 64 L61 60 L58 64 L54 64 Z"/></g>'
        '<rect x="26" y="68" width="48" height="3" fill="{ink}"/>'
    ),
    # skull and crossbones
    "GHS06": (
        '<g stroke="{ink}" stroke-width="5" stroke-linecap="round">'
        '<path d="M33 58 L67 74"/><path d="M67 58 L33 74"/></g>'
        '<circle cx="50" cy="40" r="13" fill="{ink}"/>'
        '<rect x="43" y="48" width="14" height="9" rx="2" fill="{ink}"/>'
        '<g fill="#ffffff"><circle cx="45" cy="40" r="3.6"/><circle cx="55" cy="40" r="3.6"/>'
        '<path d="M50 45 L48 49 L52 49 Z"/></g>'
    ),
    # exclamation mark
    "GHS07": (
        '<path d="M45 26 L55 26 L53 60 L47 60 Z" fill="{ink}"/><circle cx="50" cy="68" r="4.5" fill="{ink}"/>'
    ),
    # health hazard: a bust with a star burst on the chest
    "GHS08": (
        '<circle cx="50" cy="29" r="7" fill="{ink}"/>'
        '<path d="M33 74 L33 52 C33 43 40 38 50 38 C60 38 67 43 67 52 L67 74 Z" fill="{ink}"/>'
        '<path d="M50 46 L53 54 L61 54 L55 59 L57 67 L50 62 L43 67 L45 59 L39 54 L47 54 Z" fill="#ffffff"/>'
    ),
    # environment: a dead tree and a dead fish over the ground
    "GHS09": (
        '<g stroke="{ink}" stroke-width="3" stroke-linecap="round" fill="none">'
        '<path d="M36 70 L36 32"/><path d="M36 44 L28 36"/><path d="M36 50 L45 40"/><path d="M36 38 L42 30"/>'
        '<path d="M26 71 L74 71"/></g>'
        '<path d="M46 62 C52 54 64 54 70 62 C64 69 52 69 46 62 Z" fill="{ink}"/>'
        '<path d="M70 62 L77 56 L77 68 Z" fill="{ink}"/>'
        '<g stroke="#ffffff" stroke-width="1.4"><path d="M51 59 L55 63"/><path d="M55 59 L51 63"/></g>'
    ),
}


def pictogram_svg(code: str, size_px: int = 30) -> str:
    """The GHS pictogram ``code`` ("GHS01" … "GHS09") as one ``<svg>`` element.

    A white diamond with a red border (the GHS frame) around the black symbol; ``role="img"`` and a
    ``<title>`` carry the code for readers that cannot see it.

    Raises
    ------
    KeyError
        For a code outside GHS01–GHS09.
    """
    symbol = SYMBOLS[code].format(ink=INK)
    return (
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 100 100" width="{size_px}" height="{size_px}" '
        f'role="img"><title>{code}</title>'
        f'<polygon points="50,4 96,50 50,96 4,50" fill="#ffffff" stroke="{BORDER_RED}" stroke-width="7" '
        f'stroke-linejoin="miter"/><g transform="translate(50 50) scale(1.2) translate(-50 '
        f'-50)">{symbol}</g></svg>'
    )
