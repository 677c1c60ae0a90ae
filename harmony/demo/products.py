"""The invented products of the demo shop: categories, colour stories, looks, prices and stock."""

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from harmony import colour
from harmony.resources import DEMO_DIR

__all__ = ["OPEN_AND_LIGHT", "SHOP_NAME", "CURRENCY", "DEFAULT_SEED", "IMAGE_SIZE", "JPEG_QUALITY", "DEFAULT_SHOP_DIR", "CATALOGUE_COLUMNS", "CATEGORY_COUNTS", "CATEGORIES", "ColourStory", "COLOUR_STORIES", "Look", "DemoProduct", "ShopSummary", "design_products"]

#: The shop's invented name (a made-up word, no real brand, person or company).
SHOP_NAME = "Tovendel"
#: ISO 4217 code of the one currency the shop prices in.
CURRENCY = "EUR"
DEFAULT_SEED = 7_2024
#: Photo side in pixels and JPEG quality (Pillow/libjpeg scale, 85 is common practice for shops).
IMAGE_SIZE = 360
JPEG_QUALITY = 85
DEFAULT_SHOP_DIR = DEMO_DIR / "shop"
CATALOGUE_COLUMNS = ("id", "title", "category", "price", "currency", "stock", "image", "colour", "material")

#: Products per category designed first (194 in all); :data:`OPEN_AND_LIGHT` adds more.
_BASE_COUNTS = {
    "sofa": 18,
    "armchair": 16,
    "coffee table": 14,
    "rug": 18,
    "floor lamp": 12,
    "cushion": 24,
    "dining table": 12,
    "dining chair": 20,
    "pendant lamp": 12,
    "bed": 12,
    "bedside table": 14,
    "desk": 10,
    "desk chair": 12,
}

#: Products added after the first 194, of the kinds whose palettes are hardest to get right:
#: open frames (ladder-, spindle- and hoop-back chairs, open shelving, a wire-cage pendant) and
#: light neutrals (light grey and off-white upholstery, white lamps). ``(category, variant,
#: fabric)``: variants 4 and up are the open designs of :mod:`harmony.demo.draw`; ``fabric`` names
#: a colour of the neutrals story for the main colour, or None for the story's usual choice.
OPEN_AND_LIGHT = (
    ("dining chair", 4, None), ("dining chair", 5, None), ("dining chair", 6, None), ("dining chair", 4, None),
    ("coffee table", 4, None), ("bedside table", 4, None), ("bedside table", 4, "off-white"),
    ("pendant lamp", 4, None), ("pendant lamp", 2, "off-white"), ("floor lamp", 0, "off-white"),
    ("sofa", 1, "light grey"), ("sofa", 2, "off-white"), ("armchair", 0, "off-white"),
    ("armchair", 3, "light grey"), ("bed", 0, "off-white"), ("bed", 2, "light grey"),
)

#: Products per category (210 in all).
CATEGORY_COUNTS = {c: n + sum(1 for cat, _, _ in OPEN_AND_LIGHT if cat == c) for c, n in _BASE_COUNTS.items()}
CATEGORIES = tuple(CATEGORY_COUNTS)

_ID_PREFIX = {
    "sofa": "SOF", "armchair": "ARM", "coffee table": "CTB", "rug": "RUG", "floor lamp": "FLP",
    "cushion": "CSH", "dining table": "DTB", "dining chair": "DCH", "pendant lamp": "PND",
    "bed": "BED", "bedside table": "BST", "desk": "DSK", "desk chair": "DCR",
}

#: Plausible price ranges in EUR per category (invented, shaped like mid-market shops).
_PRICE_RANGE = {
    "sofa": (690, 2190), "armchair": (290, 990), "coffee table": (149, 690), "rug": (89, 790),
    "floor lamp": (79, 390), "cushion": (19, 69), "dining table": (349, 1590),
    "dining chair": (79, 349), "pendant lamp": (49, 329), "bed": (449, 1790),
    "bedside table": (69, 329), "desk": (199, 890), "desk chair": (119, 590),
}


@dataclass(frozen=True)
class ColourStory:
    """A named family of colours that products across categories share.

    Each colour is ``(name, "#rrggbb", coarse)``: the shade's own name (used in titles), its sRGB
    code, and the coarse colour word a catalogue would carry.
    """

    name: str
    collections: tuple
    fabrics: tuple
    accents: tuple
    woods: tuple
    metals: tuple
    light: tuple


#: The colour stories (invented values). Woods and metals are materials, not dyes.
COLOUR_STORIES = (
    ColourStory(
        "terracotta and sand", ("Tirsa", "Kalvo", "Ombrel"),
        fabrics=(("terracotta", "#b0573b", "orange"), ("rust", "#8c3d27", "red"), ("sand", "#d6c1a0", "beige")),
        accents=(("sand", "#d9c4a2", "beige"), ("ochre", "#c58b3c", "yellow"), ("cream", "#ece2cc", "white")),
        woods=(("oak", "#c39a6b", "natural"),),
        metals=(("black steel", "#2d2b2a", "black"),),
        light=("sand", "#dcc9a9", "beige"),
    ),
    ColourStory(
        "teal and brass", ("Marnik", "Veskar", "Lunder"),
        fabrics=(("teal", "#1d6a6c", "blue"), ("petrol", "#18495a", "blue"), ("emerald", "#2c6a4e", "green")),
        accents=(("mustard", "#c39a3a", "yellow"), ("cream", "#ebe2cc", "white"), ("teal", "#2a7b7c", "blue")),
        woods=(("walnut", "#6e4a33", "brown"),),
        metals=(("brass", "#b38f42", "gold"),),
        light=("cream", "#e9dfc8", "white"),
    ),
    ColourStory(
        "sage and oak", ("Fennow", "Brisel", "Odden"),
        fabrics=(("sage", "#8ea185", "green"), ("olive", "#616c47", "green"), ("oat", "#ddd3bf", "beige")),
        accents=(("oat", "#e0d7c4", "beige"), ("moss", "#6f7d55", "green"), ("clay", "#b98a6a", "brown")),
        woods=(("oak", "#bf9264", "natural"), ("ash", "#d2b68e", "natural")),
        metals=(("black steel", "#2b2b2a", "black"),),
        light=("oat", "#e2d9c6", "beige"),
    ),
    ColourStory(
        "navy and cream", ("Olvard", "Dunmar", "Ostra"),
        fabrics=(("navy", "#27365a", "blue"), ("denim", "#4b6386", "blue"), ("cream", "#e9dfca", "white")),
        accents=(("cream", "#ede4d0", "white"), ("sky", "#a9b9cc", "blue"), ("navy", "#2b3b60", "blue")),
        woods=(("ash", "#d0b38b", "natural"),),
        metals=(("chrome", "#c4c6c8", "silver"),),
        light=("cream", "#ece3cf", "white"),
    ),
    ColourStory(
        "charcoal and mustard", ("Ulvessa", "Drennick", "Tarnel"),
        fabrics=(("charcoal", "#3b3c3f", "grey"), ("slate", "#5a5f66", "grey"), ("mustard", "#c9992d", "yellow")),
        accents=(("mustard", "#cc9c30", "yellow"), ("ochre", "#b8812f", "yellow"), ("stone", "#b3ada3", "grey")),
        woods=(("smoked oak", "#5b4636", "brown"),),
        metals=(("black steel", "#232323", "black"),),
        light=("stone", "#c9c6bf", "grey"),
    ),
    ColourStory(
        "blush and walnut", ("Yarsel", "Pellin", "Morva"),
        fabrics=(("blush", "#d6a39b", "pink"), ("rose", "#b47873", "pink"), ("plaster", "#e3cbbd", "beige")),
        accents=(("berry", "#7e3b4a", "red"), ("cream", "#ede3d2", "white"), ("blush", "#dcaaa1", "pink")),
        woods=(("walnut", "#6a442f", "brown"),),
        metals=(("brass", "#b08d45", "gold"),),
        light=("plaster", "#e6d2c5", "beige"),
    ),
    ColourStory(
        "neutrals", ("Kemsel", "Nimbel", "Quen", "Pimsel"),
        fabrics=(("off-white", "#e9e5dc", "white"), ("light grey", "#bcbab4", "grey"),
                 ("stone", "#9f988c", "beige"), ("graphite", "#4a4a4a", "grey")),
        accents=(("black", "#262626", "black"), ("light grey", "#c4c2bc", "grey"), ("off-white", "#ece9e1", "white")),
        woods=(("oak", "#c29868", "natural"), ("black-stained ash", "#2f2b28", "black")),
        metals=(("black steel", "#262626", "black"), ("chrome", "#c6c7c9", "silver")),
        light=("off-white", "#ebe7df", "white"),
    ),
)
_STORY_WEIGHTS = np.array([1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.6])

#: Upholstery textures and the material word the catalogue carries for each.
_FABRIC_MATERIAL = {"weave": "linen", "velvet": "velvet", "boucle": "boucle", "leather": "leather"}


@dataclass(frozen=True)
class Look:
    """How one product is drawn: colours (sRGB in [0, 1]) and textures of its parts."""

    main: tuple
    main_tex: str
    second: tuple
    second_tex: str
    accent: tuple
    frame: tuple
    frame_tex: str
    variant: int


@dataclass(frozen=True)
class DemoProduct:
    """One invented product: its catalogue row and what its photos show.

    ``images`` holds ``(relative_path, kind)`` pairs, kind ``"studio"`` or ``"scene"``, in the
    order the catalogue lists them; ``photo_seed`` seeds the generator its photos are drawn with.
    """

    id: str
    title: str
    category: str
    price: float
    currency: str
    stock: int | None
    colour: str
    material: str
    story: str
    look: Look
    images: tuple
    photo_seed: int

    def row(self):
        """The catalogue row as a dict keyed by :data:`CATALOGUE_COLUMNS`."""
        return {
            "id": self.id,
            "title": self.title,
            "category": self.category,
            "price": f"{self.price:.2f}",
            "currency": self.currency,
            "stock": "" if self.stock is None else str(self.stock),
            "image": "|".join(path for path, _ in self.images),
            "colour": self.colour,
            "material": self.material,
        }


@dataclass(frozen=True)
class ShopSummary:
    """What :func:`write_shop` wrote."""

    directory: Path
    catalogue: Path
    products: int
    images: int
    seconds: float


# --------------------------------------------------------------------------------------------
# Products
# --------------------------------------------------------------------------------------------


def _jitter(hex_code, rng, j=3.0, ab=1.5):
    """The colour ``hex_code`` moved a little in CAM02-UCS (dye lots differ), as sRGB in [0, 1]."""
    jab = colour.srgb1_to_jab(colour.hex_to_srgb1(hex_code))
    jab = jab + np.array([rng.normal(0, j), rng.normal(0, ab), rng.normal(0, ab)])
    srgb = np.clip(colour.jab_to_srgb1(jab), 0.0, 1.0)
    return tuple(float(round(v, 4)) for v in srgb)


def _pick(seq, rng):
    return seq[int(rng.integers(len(seq)))]


def _design_look(category, story, rng):
    """Choose the colours, textures and variant of one product; returns (look, colour, material, shade)."""
    fabric = _pick(story.fabrics, rng)
    accent = _pick([a for a in story.accents if a[0] != fabric[0]] or story.accents, rng)
    wood = _pick(story.woods, rng)
    metal = _pick(story.metals, rng)
    light = story.light
    variant = int(rng.integers(4))
    frame_is_metal = rng.random() < 0.4
    frame, frame_tex = (metal, "metal") if frame_is_metal else (wood, "wood")
    fabric_tex = _pick(("weave", "weave", "velvet", "boucle", "leather"), rng)
    if fabric_tex == "leather" and fabric[2] in ("blue", "green", "pink"):
        fabric_tex = "velvet"

    main, main_tex, second, second_tex = fabric, fabric_tex, light, "weave"
    shown, material = fabric, _FABRIC_MATERIAL[fabric_tex]
    if category == "rug":
        main_tex = _pick(("wool", "wool", "jute"), rng)
        main, second = (light, fabric) if rng.random() < 0.5 else (fabric, light)
        shown, material = main, "jute" if main_tex == "jute" else "wool"
    elif category == "cushion":
        main_tex = _pick(("weave", "velvet", "boucle"), rng)
        material = _FABRIC_MATERIAL[main_tex]
    elif category in ("coffee table", "dining table", "bedside table", "desk"):
        if rng.random() < 0.3:
            main, main_tex, material = fabric, "lacquer", "lacquered MDF"
        else:
            main, main_tex, material = wood, "wood", wood[0]
        shown = main
        second, second_tex = (fabric, "lacquer") if rng.random() < 0.5 else (main, main_tex)
    elif category == "dining chair":
        if rng.random() < 0.35:
            main, main_tex, material = fabric, "lacquer", "painted beech"
        else:
            main, main_tex, material = wood, "wood", wood[0]
        shown = main
        second, second_tex = (fabric, fabric_tex) if variant % 2 else (main, main_tex)
    elif category in ("floor lamp", "pendant lamp"):
        frame, frame_tex = metal, "metal"
        style = rng.random()
        if style < 0.4:
            main, main_tex, material = light, "weave", "linen shade"
        elif style < 0.75:
            main, main_tex, material = fabric, "lacquer", "powder-coated steel"
        else:
            main, main_tex, material = ("natural", wood[1], wood[2]), "rattan", "rattan"
        shown = main if main_tex != "weave" else (fabric if rng.random() < 0.5 else light)
        if main_tex == "weave":
            main = shown
    elif category == "desk chair":
        frame, frame_tex = metal, "metal"
        if fabric_tex in ("boucle", "velvet"):
            main_tex = "weave"
            material = "linen"
    elif category == "bed":
        second, second_tex = light, "weave"
    look = Look(
        main=_jitter(main[1], rng),
        main_tex=main_tex,
        second=_jitter(second[1], rng),
        second_tex=second_tex,
        accent=_jitter(accent[1], rng),
        frame=_jitter(frame[1], rng, j=2.0, ab=0.8),
        frame_tex=frame_tex,
        variant=variant,
    )
    return look, shown[2], material, shown[0]


_DESCRIPTORS = {
    "sofa": ("2-seat sofa", "3-seat sofa", "3-seat sofa", "2-seat sofa"),
    "armchair": ("armchair", "lounge chair", "armchair", "reading chair"),
    "coffee table": ("coffee table", "round coffee table", "coffee table with shelf", "low coffee table",
                     "open-frame coffee table"),
    "rug": ("rug 160x230", "rug 200x300", "rug 140x200", "rug 250x350"),
    "floor lamp": ("floor lamp", "tripod floor lamp", "floor lamp", "tripod floor lamp"),
    "cushion": ("cushion 45x45", "striped cushion 50x50", "piped cushion 45x45", "cushion 50x50"),
    "dining table": ("dining table for 4", "dining table for 6", "dining table for 6", "dining table for 8"),
    "dining chair": ("dining chair", "slatted dining chair", "upholstered dining chair", "dining chair",
                     "ladder-back dining chair", "spindle-back dining chair", "hoop-back dining chair"),
    "pendant lamp": ("dome pendant lamp", "cone pendant lamp", "globe pendant lamp", "drum pendant lamp",
                     "wire cage pendant lamp"),
    "bed": ("double bed 140x200", "double bed 160x200", "king bed 180x200", "double bed 160x200"),
    "bedside table": ("bedside table", "bedside table with 2 drawers", "bedside table", "bedside table",
                      "open shelf bedside table"),
    "desk": ("desk", "desk with drawers", "writing desk", "desk with drawers"),
    "desk chair": ("desk chair", "office chair", "desk chair", "office chair"),
}
_SIZE_FACTOR = {"sofa": (0.8, 1.0, 1.0, 0.8), "rug": (1.0, 1.5, 0.7, 2.1), "dining table": (0.75, 1.0, 1.0, 1.3),
                "bed": (0.85, 1.0, 1.2, 1.0)}
_MATERIAL_FACTOR = {"velvet": 1.15, "boucle": 1.2, "leather": 1.45, "walnut": 1.25, "smoked oak": 1.2,
                    "jute": 0.7, "rattan": 1.1}


def _price(category, variant, material, rng):
    lo, hi = _PRICE_RANGE[category]
    base = lo + (hi - lo) * rng.beta(2.0, 3.0)
    base *= _SIZE_FACTOR.get(category, (1.0,) * 4)[variant] * _MATERIAL_FACTOR.get(material, 1.0)
    base = min(max(base, lo), hi * 1.2)
    if base < 100:
        return float(np.floor(base) + 0.95)  # 24.95: common retail price ending
    return float(np.rint(base / 10.0) * 10.0 - 1.0)  # 689.00


def design_products(rng):
    """Design every product of the demo shop from ``rng`` (a :class:`numpy.random.Generator`).

    Returns
    -------
    tuple of DemoProduct
        In catalogue order: by category as in :data:`CATEGORIES`, then by number. About one in
        ten has a room-scene photo after its studio photo; four have only a room scene.
    """
    if not isinstance(rng, np.random.Generator):
        raise TypeError(f"rng must be a numpy.random.Generator, got {type(rng).__name__}")
    designs = []
    weights = _STORY_WEIGHTS / _STORY_WEIGHTS.sum()
    for category in CATEGORIES:
        used_titles = set()
        for number in range(1, _BASE_COUNTS[category] + 1):
            story = COLOUR_STORIES[int(rng.choice(len(COLOUR_STORIES), p=weights))]
            look, coarse, material, shade = _design_look(category, story, rng)
            descriptor = _DESCRIPTORS[category][look.variant]
            finish = material if shade == material else f"{shade} {material}"
            names = list(rng.permutation(story.collections))
            titles = [f"{name} {descriptor}, {finish}" for name in names]
            title = next((t for t in titles if t not in used_titles), f"{titles[0]} II")
            used_titles.add(title)
            price = _price(category, look.variant, material, rng)
            u = rng.random()
            stock = 0 if u < 0.08 else None if u < 0.25 else int(rng.integers(1, 41))
            pid = f"{_ID_PREFIX[category]}-{number:03d}"
            designs.append(dict(id=pid, title=title, category=category, price=price, stock=stock,
                                colour=coarse, material=material, story=story.name, look=look,
                                photo_seed=int(rng.integers(2**62))))
    n = len(designs)  # the first 194: scene photos are chosen among them only
    with_scene = rng.choice(n, size=round(n / 10), replace=False)
    scene_only = set(designs[int(i)]["id"] for i in with_scene[:4])
    with_scene = set(designs[int(i)]["id"] for i in with_scene)
    designs += _open_and_light(np.random.default_rng(int(rng.integers(2**62))), designs)
    order = {c: k for k, c in enumerate(CATEGORIES)}
    designs.sort(key=lambda d: (order[d["category"]], d["id"]))
    products = []
    for d in designs:
        images = [] if d["id"] in scene_only else [(f"images/{d['id']}.jpg", "studio")]
        if d["id"] in with_scene:
            images.append((f"images/{d['id']}-room.jpg", "scene"))
        products.append(DemoProduct(currency=CURRENCY, images=tuple(images), **d))
    return tuple(products)




def _open_and_light(rng, designs):
    """Design the products of :data:`OPEN_AND_LIGHT` from their own generator ``rng``."""
    neutrals = next(s for s in COLOUR_STORIES if s.name == "neutrals")
    numbers = {}
    for d in designs:
        numbers[d["category"]] = max(numbers.get(d["category"], 0), int(d["id"].split("-")[1]))
    titles = {d["title"] for d in designs}
    out = []
    for category, variant, fabric in OPEN_AND_LIGHT:
        story = neutrals if fabric else COLOUR_STORIES[int(rng.integers(len(COLOUR_STORIES)))]
        look, coarse, material, shade = _design_look(category, story, rng)
        changes = {"variant": variant}
        if fabric:
            name, code, coarse = next(f for f in story.fabrics + story.accents if f[0] == fabric)
            changes["main"] = _jitter(code, rng, j=1.0, ab=0.5)
            if category in ("pendant lamp", "floor lamp"):
                changes["main_tex"] = "lacquer" if category == "pendant lamp" else "weave"
                material = "glass" if category == "pendant lamp" else "linen shade"
            shade = name
        elif category in ("dining chair", "coffee table", "bedside table"):
            wood = _pick(story.woods, rng)
            changes.update(main=_jitter(wood[1], rng), main_tex="wood", second=_jitter(wood[1], rng),
                           second_tex="wood")
            shade, material, coarse = wood[0], wood[0], wood[2]
        elif category == "pendant lamp":
            metal = _pick(story.metals, rng)
            changes.update(frame=_jitter(metal[1], rng, j=2.0, ab=0.8), frame_tex="metal")
            shade, material, coarse = metal[0], "steel wire", metal[2]
        look = Look(**{**look.__dict__, **changes})
        descriptor = _DESCRIPTORS[category][variant]
        finish = material if shade == material else f"{shade} {material}"
        title = f"{_pick(story.collections, rng)} {descriptor}, {finish}"
        while title in titles:
            title += " II"
        titles.add(title)
        numbers[category] += 1
        u = rng.random()
        out.append(dict(id=f"{_ID_PREFIX[category]}-{numbers[category]:03d}", title=title, category=category,
                        price=_price(category, min(variant, 3), material, rng),
                        stock=0 if u < 0.08 else None if u < 0.25 else int(rng.integers(1, 41)),
                        colour=coarse, material=material, story=story.name, look=look,
                        photo_seed=int(rng.integers(2**62))))
    return out
