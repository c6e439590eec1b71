"""Reports written one stone at a time: the same bytes as the whole document encoded at once.

The JSON pieces must join to exactly ``json.dumps(batch_document(result), ...)`` (the
critline.batch/1 contract of shared/design.md; byte-identical output is what the
determinism tests rely on), for the file's indented form and the command's one-line form.
"""

import json
from dataclasses import replace

import pytest

from critline.report import batch_csv, batch_document, write_reports
from critline.report.document import iter_batch_json
from critline.report.html import batch_html, iter_batch_html
from critline.report.table import iter_batch_csv


def _renamed(result, name):
    """The sample batch with its first stone renamed (names are the user's text)."""
    first, *rest = result.stones
    return replace(result, stones=(replace(first, name=name), *rest))


@pytest.mark.parametrize("indent", [1, None])
@pytest.mark.parametrize("name", ["oval", 'a "quoted"\nname\twith\\ctrl \x00 é 石 \u2028', ""])
def test_json_pieces_join_to_the_whole_document(sample_result, indent, name):
    result = _renamed(sample_result, name)
    whole = json.dumps(batch_document(result), indent=indent, ensure_ascii=False)
    pieces = list(iter_batch_json(result, indent=indent))
    assert "".join(pieces) == whole
    assert len(pieces) >= len(result.stones) + 2  # one piece per stone, not one for all
    assert json.loads("".join(pieces))["stones"][0]["stone"] == name


@pytest.mark.parametrize("indent", [1, None])
def test_json_pieces_of_a_batch_without_stones(sample_result, indent):
    result = replace(sample_result, stones=())
    assert "".join(iter_batch_json(result, indent=indent)) == json.dumps(
        batch_document(result), indent=indent, ensure_ascii=False)


def test_csv_and_html_pieces_are_per_stone(sample_result):
    csv_pieces = list(iter_batch_csv(sample_result))
    assert len(csv_pieces) == 1 + len(sample_result.stones)
    assert "".join(csv_pieces) == batch_csv(sample_result)
    html_pieces = list(iter_batch_html(sample_result, generated="then"))
    assert len(html_pieces) >= len(sample_result.stones) + 2
    assert "".join(html_pieces) == batch_html(sample_result, generated="then")


def test_written_files_are_the_whole_texts(sample_result, tmp_path):
    paths = write_reports(sample_result, tmp_path / "r")
    assert paths["json"].read_bytes() == (json.dumps(batch_document(sample_result), indent=1,
                                                     ensure_ascii=False) + "\n").encode()
    assert paths["csv"].read_bytes() == batch_csv(sample_result).encode()
    html = paths["html"].read_text(encoding="utf-8")
    written = html.split("<dt>written</dt><dd>")[1].split(" by critline")[0]
    assert html == batch_html(sample_result, generated=written)
    # a second set goes under the next free name, the first is kept
    again = write_reports(sample_result, tmp_path / "r")
    assert again["json"].name == "report-2.json" and paths["json"].exists()
    assert not list((tmp_path / "r").glob(".*.tmp"))  # no temporary file left behind
