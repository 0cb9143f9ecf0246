"""The demo's colours, defined once: a dusk-quarry palette (slate ground, warm stone, signal tones).

Names describe the role a colour plays on screen, so every scene draws the same kinds of things
the same way. Colours are (r, g, b) tuples of 0..255 ints; nothing here imports pygame.
"""

from __future__ import annotations

Colour = tuple[int, int, int]

NIGHT_SLATE: Colour = (22, 26, 34)        # background
DEEP_SLATE: Colour = (34, 40, 52)         # inset and overlay panels
BEDROCK: Colour = (70, 78, 92)            # static ground, walls, slopes
BEDROCK_EDGE: Colour = (110, 120, 138)    # outlines of static bodies
QUARRY_OCHRE: Colour = (214, 160, 84)     # cut blocks
RIVER_STONE: Colour = (146, 168, 178)     # boulders (balls)
FLINT_ROSE: Colour = (196, 110, 122)      # faceted stones (polytopes)
MOSS_LAMP: Colour = (132, 196, 120)       # billiard balls, highlight set
FELT_TEAL: Colour = (26, 122, 98)         # billiard table
CRATE_PINE: Colour = (150, 100, 56)      # crates
BELT_STEEL: Colour = (120, 132, 160)      # conveyor belt (static)
PUSHER_BLUE: Colour = (70, 140, 230)      # the conveyor's pusher (kinematic)
CUE_IVORY: Colour = (240, 234, 214)       # the cue ball
BRIDGE_TIMBER: Colour = (176, 118, 62)    # the drawbridge's deck
GATE_VERDIGRIS: Colour = (72, 150, 130)   # the swinging gate (weathered bronze)
KEG_GOLD: Colour = (232, 204, 112)        # kegs rolled across the bridge
KEEP_SANDSTONE: Colour = (168, 160, 140)  # the castle's gatehouse wall (static)
MOAT_BLUE: Colour = (24, 84, 140)         # the moat's bed (static)
ROPE_HEMP: Colour = (204, 190, 160)       # ropes and chains drawn between joint anchors
SIGNAL_AMBER: Colour = (255, 196, 64)     # picked body, drag spring
CHALK: Colour = (226, 230, 236)           # text
FADED_CHALK: Colour = (140, 148, 160)     # secondary text, grid, slice-plane marker
OUTLINE_INK: Colour = (12, 14, 18)        # polygon outlines

#: the colour of every body role (a scene gives each body a role; different roles, different colours)
ROLE_COLOURS: dict[str, Colour] = {
    "ground": BEDROCK,
    "block": QUARRY_OCHRE,
    "boulder": RIVER_STONE,
    "facet": FLINT_ROSE,
    "ball": MOSS_LAMP,
    "table": FELT_TEAL,
    "crate": CRATE_PINE,
    "belt": BELT_STEEL,
    "pusher": PUSHER_BLUE,
    "cue": CUE_IVORY,
    "deck": BRIDGE_TIMBER,
    "gate": GATE_VERDIGRIS,
    "keg": KEG_GOLD,
    "keep": KEEP_SANDSTONE,
    "moat": MOAT_BLUE,
}


def shade(colour: Colour, light: float) -> Colour:
    """The colour lit by ``light`` in [0, 1] (ambient 0.35 plus diffuse), clamped to 0..255."""
    f = 0.35 + 0.65 * max(0.0, min(1.0, light))
    return (min(255, int(colour[0] * f)), min(255, int(colour[1] * f)), min(255, int(colour[2] * f)))


def mix(a: Colour, b: Colour, t: float) -> Colour:
    """Linear blend of two colours (t = 0 gives a)."""
    return (int(a[0] + (b[0] - a[0]) * t), int(a[1] + (b[1] - a[1]) * t), int(a[2] + (b[2] - a[2]) * t))
