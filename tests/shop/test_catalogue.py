"""Tests of harmony.shop.catalogue: reading, validation messages, category names.

The fixture catalogues in tests/data/catalogues/ are invented; the expected values below are
read off those files by hand.
"""

from pathlib import Path

import pytest

from harmony.errors import CatalogueError
from harmony.shop.catalogue import Product, normalise_category, read_catalogue

DATA = Path(__file__).parent.parent / "data" / "catalogues"


def test_csv_fields_and_attributes():
    cat = read_catalogue(DATA / "good.csv")
    assert [p.id for p in cat.products] == ["S-1", "R-1", "L-1"]
    assert cat.problems == () and cat.skipped_rows == 0
    sofa, rug, lamp = cat.products
    assert sofa == Product(
        id="S-1", category="Sofa", price=899.0, stock=3, title="Low sofa", currency="EUR",
        images=("images/sofa-grey.png",), attributes={"material": "wool"},
    )
    assert rug.images == ("images/rug-ochre.png", "images/sofa-grey.png")  # '|' separates images
    assert rug.stock is None and rug.in_stock(5)  # empty stock = in stock, quantity unknown
    assert lamp.stock == 0 and not lamp.in_stock()
    assert rug.category_key == "rug"
    assert cat.image_path(sofa.images[0]) == (DATA / "images" / "sofa-grey.png").resolve()


def test_jsonl_lists_strings_and_attribute_values():
    cat = read_catalogue(DATA / "good.jsonl")
    assert [p.id for p in cat.products] == ["S-1", "R-1"]  # the blank line is skipped
    sofa, rug = cat.products
    assert sofa.images == ("images/sofa-grey.png",) and sofa.stock == 3
    assert rug.images == ("images/rug-ochre.png",) and rug.price == 149.5
    assert rug.attributes == {"tags": '["flat", "weave"]'}
    assert rug.title == "" and rug.currency == ""


def test_csv_every_problem_with_its_row():
    cat = read_catalogue(DATA / "bad.csv")
    where = str(DATA / "bad.csv")
    assert [str(p) for p in cat.problems] == [
        f"{where}:3: id: duplicate id 'S-1'",
        f"{where}:4: id: missing required field",
        f"{where}:5: price: not a number: 'cheap'",
        f"{where}:6: price: negative price -5",
        f"{where}:7: stock: negative stock -2",
        f"{where}:8: category: missing required field",
        f"{where}:8: image: file not found: images/missing.png",
        f"{where}:9: image: missing required field",
        f"{where}:10: stock: not a whole number: '2.5'",
    ]
    assert [p.id for p in cat.products] == ["S-1", "L-4"]  # the first S-1 is kept
    assert cat.skipped_rows == 8


def test_jsonl_every_problem_with_its_line():
    cat = read_catalogue(DATA / "bad.jsonl")
    where = str(DATA / "bad.jsonl")
    assert [str(p) for p in cat.problems] == [
        f"{where}:2: image: must be a path or a list of paths",
        f"{where}:3: row: not JSON: Expecting value (column 1)",
        f"{where}:4: row: must be a JSON object",
        f"{where}:5: price: not a number: 'true'",
        f"{where}:6: stock: negative stock -1",
        f"{where}:6: image: file not found: images/nope.png",
    ]
    assert [p.id for p in cat.products] == ["S-1"] and cat.skipped_rows == 5


def test_csv_quoting_follows_rfc_4180(tmp_path):
    # RFC 4180 section 2: fields with commas, quotes or line breaks are enclosed in double quotes,
    # a quote inside is doubled. A record spanning two lines is reported at its first line.
    (tmp_path / "a.png").write_bytes(b"x")
    (tmp_path / "c.csv").write_text(
        'id,category,price,image,title\n'
        '"A,1",Sofa,10,a.png,"Sofa, ""two"" seats\nwide"\n'
        'B,Sofa,x,a.png,b\n',
        encoding="utf-8",
    )
    cat = read_catalogue(tmp_path / "c.csv")
    assert cat.products[0].id == "A,1"
    assert cat.products[0].title == 'Sofa, "two" seats\nwide'
    assert [p.row for p in cat.problems] == [4]


def test_more_problem_kinds(tmp_path):
    (tmp_path / "a.png").write_bytes(b"x")
    (tmp_path / "c.csv").write_text(
        "\ufeffid,category,price,image,stock\n"  # a byte-order mark is allowed
        "A,Sofa,nan,a.png,1\n"
        "B,Sofa,5,a.png,many\n"
        "C,Sofa,5,a.png\n"
        "D,Sofa,5, a.png | ,4.0\n",
        encoding="utf-8",
    )
    cat = read_catalogue(tmp_path / "c.csv")
    assert [(p.row, p.field, p.reason) for p in cat.problems] == [
        (2, "price", "not a finite number: 'nan'"),
        (3, "stock", "not a whole number: 'many'"),
        (4, "row", "4 cells, the header has 5"),
    ]
    assert cat.products[0].id == "D" and cat.products[0].stock == 4
    assert cat.products[0].images == ("a.png",)


@pytest.mark.parametrize(
    "name, text, match",
    [
        ("c.csv", "id,category,image\nA,Sofa,a.png\n", r"c\.csv:1: header: missing required column\(s\) 'price'"),
        ("c.csv", "", r"c\.csv: empty catalogue"),
        ("c.csv", "id,id,category,price,image\n", r"c\.csv:1: header: column 'id' appears twice"),
        # Names are read without case, so two that differ only in case are one name twice.
        ("c.csv", "id,ID,category,price,image\n", r"c\.csv:1: header: column 'id' appears twice"),
        ("c.txt", "id\n", r"c\.txt: unknown catalogue format '\.txt'"),
    ],
)
def test_file_level_errors(tmp_path, name, text, match):
    (tmp_path / name).write_text(text, encoding="utf-8")
    with pytest.raises(CatalogueError, match=match):
        read_catalogue(tmp_path / name)


def test_missing_and_undecodable_files(tmp_path):
    with pytest.raises(CatalogueError, match=r"nope\.csv: catalogue not found"):
        read_catalogue(tmp_path / "nope.csv")
    (tmp_path / "latin.csv").write_bytes("id,category,price,image\nA,Caf\xe9,1,a.png\n".encode("latin-1"))
    with pytest.raises(CatalogueError, match=r"latin\.csv: not UTF-8 text"):
        read_catalogue(tmp_path / "latin.csv")


@pytest.mark.parametrize(
    "name, expected",
    [
        ("Dining Chair", "dining chair"),
        ("  dining\t\nCHAIR ", "dining chair"),
        ("STRASSE", "strasse"),
        ("Straße", "strasse"),  # Unicode case folding maps sharp s to "ss" (Unicode CaseFolding.txt)
        ("ＳＯＦＡ", "sofa"),  # full-width letters, NFKC compatibility decomposition (UAX #15)
    ],
)
def test_normalise_category(name, expected):
    assert normalise_category(name) == expected


def test_image_paths_are_joined_and_normalised_lexically(tmp_path):
    (tmp_path / "img").mkdir()
    (tmp_path / "img" / "a.png").write_bytes(b"x")
    (tmp_path / "c.csv").write_text("id,category,price,image\nA,Sofa,1,img/../img/./a.png\n", encoding="utf-8")
    cat = read_catalogue(tmp_path / "c.csv")
    [product] = cat.products
    want = str((tmp_path / "img" / "a.png").resolve())
    # os.path.normpath drops '.' and folds 'x/..' without touching the file system (Python docs).
    assert cat.image_file(product.images[0]) == want
    assert cat.image_path(product.images[0]) == Path(want)


def test_jsonl_names_must_be_text_not_lists_or_objects(tmp_path):
    # JSON Lines values can be lists and objects; an id, category, title or currency cannot be one
    # (the category ["sofa"] would otherwise make a category of its own).
    (tmp_path / "a.png").write_bytes(b"x")
    (tmp_path / "c.jsonl").write_text(
        '{"id": "S-1", "category": ["sofa"], "price": 1, "image": "a.png"}\n'
        '{"id": {"n": 2}, "category": "sofa", "price": 1, "image": "a.png", "title": ["x"]}\n'
        '{"id": "S-3", "category": "sofa", "price": 1, "image": "a.png"}\n')
    cat = read_catalogue(tmp_path / "c.jsonl")
    where = str(tmp_path / "c.jsonl")
    assert [str(p) for p in cat.problems] == [
        f"{where}:1: category: must be text, not a JSON list",
        f"{where}:2: id: must be text, not a JSON object",
        f"{where}:2: title: must be text, not a JSON list",
    ]
    assert [p.id for p in cat.products] == ["S-3"] and cat.skipped_rows == 2


def test_column_names_and_keys_are_read_without_case(tmp_path):
    # Shop exports capitalise their headers ("ID", "Price"): the same products as lowercase
    # names give. A JSON object whose keys fold alike ("id" and "ID") is a row problem.
    for name in ("a.png", "b.png"):
        (tmp_path / name).write_bytes(b"an image file; only its presence is checked here")
    (tmp_path / "lower.csv").write_text("id,title,category,price,stock,image\nA,Lamp,lamp,10,2,a.png\n")
    (tmp_path / "upper.csv").write_text(" ID ,Title,CATEGORY,Price,Stock,Image\nA,Lamp,lamp,10,2,a.png\n")
    lower, upper = read_catalogue(tmp_path / "lower.csv"), read_catalogue(tmp_path / "upper.csv")
    assert upper.products and upper.problems == () and upper.products == lower.products
    (tmp_path / "c.jsonl").write_text(
        '{"ID": "A", "Category": "lamp", "Price": 10, "Image": "a.png"}\n'
        '{"id": "B", "ID": "C", "category": "lamp", "price": 10, "image": "b.png"}\n')
    cat = read_catalogue(tmp_path / "c.jsonl")
    assert [p.id for p in cat.products] == ["A"] and cat.products[0].price == 10
    assert [(p.row, p.field, p.reason) for p in cat.problems] == [
        (2, "row", "key 'id' is given twice (keys are read without case)")]
