"""Static HTML copy (self-contained) and the read-only case-conference server."""

from __future__ import annotations

import re
import urllib.error
import urllib.request
from html.parser import HTMLParser

import nbformat
import pytest
from test_export import invented_case, reviewed_record

from pftwork.export.html import render_html, write_html
from pftwork.export.notebook import export_notebook
from pftwork.export.present import load_source, serve
from pftwork.interpret.cautions import CAUTIONS


class _Collector(HTMLParser):
    """Collects start tags and their attributes (html.parser, Python 3.11 standard library)."""

    def __init__(self):
        super().__init__()
        self.tags: list[tuple[str, dict]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data):
        self.text.append(data)


def _parse(page: str) -> _Collector:
    parser = _Collector()
    parser.feed(page)
    return parser


@pytest.fixture(scope="module")
def page() -> str:
    return render_html(reviewed_record())


class TestSelfContained:
    def test_no_script_no_external_resource(self, page):
        """No script element, no src/href attribute, no link element, no url() in the CSS."""
        parsed = _parse(page)
        tags = {t for t, _ in parsed.tags}
        assert not tags & {"script", "link", "img", "iframe", "object", "embed"}
        assert [] == [(t, a) for t, a in parsed.tags if {"src", "href"} & set(a)]
        assert not re.search(r"url\(|@import|https?://", page)

    def test_csp_meta_forbids_everything_else(self, page):
        """A Content-Security-Policy meta tag allows only inline style."""
        metas = [a for t, a in _parse(page).tags if t == "meta"]
        csp = next(a["content"] for a in metas if a.get("http-equiv") == "Content-Security-Policy")
        assert "default-src 'none'; style-src 'unsafe-inline'" == csp

    def test_cautions_chain_head_and_steps(self, page):
        """Every caution, the chain head and a section per step are on the page."""
        text = " ".join(_parse(page).text)
        for caution in CAUTIONS:
            assert caution in text
        assert re.search(r"Record chain head \(SHA-256\):\s+[0-9a-f]{64}", text)
        assert 8 == page.count('<section class="step"')
        assert "Reason for the amendment: History of 40 pack-years" in text


class TestZscoreGraphics:
    """REPORT-2017 (Culver et al., AJRCCM 2017) asks for a z-score graphic beside the values."""

    def test_chart_after_header_table_before_steps(self, page):
        """One inline z-score chart (role="img") sits between the header table and step 1."""
        charts = [a for t, a in _parse(page).tags if t == "svg" and a.get("class") == "pft-zchart"]
        assert 1 == len(charts) and "img" == charts[0]["role"]
        assert page.index('class="facts"') < page.index("pft-zchart") < page.index("<section")

    def test_chart_summarises_the_recorded_values(self, page):
        """The chart's text alternative gives the FEV1 z-scores interpret() computes."""
        from pftwork.interpret import interpret

        values = interpret(invented_case()).values
        label = next(a["aria-label"] for t, a in _parse(page).tags
                     if t == "svg" and a.get("class") == "pft-zchart")
        assert (f"FEV1 {values['pre']['FEV1']['z']:+.2f} pre-BD, "
                f"{values['post']['FEV1']['z']:+.2f} post-BD") in label

    def test_glyph_column_in_each_value_table(self, page):
        """Each row of a step's value table ends with a z-score glyph (airflow: FEV1, FVC,
        FEV1/FVC with z; PEF has none here, so its glyph cell is empty)."""
        airflow = page[page.index('id="step-airflow"'):]
        table = airflow[:airflow.index("</table>")]
        assert table.count("<tr>") - 1 == table.count('<td class="glyph">')
        assert 3 == table.count('class="pft-zglyph"')
        assert "z -5 … +3" in table


def test_html_from_notebook_has_the_notebook_chain_head(tmp_path):
    """Written from an exported notebook, the page carries that notebook's chain head."""
    nb_path = export_notebook(reviewed_record(), tmp_path / "ws.ipynb", execute=False)
    head = nbformat.read(nb_path, as_version=4).metadata["pftwork"]["chain_head"]
    html_path = write_html(nb_path, tmp_path / "ws.html")
    assert head in html_path.read_text(encoding="utf-8")


class TestPresent:
    def test_serves_deidentified_read_only_page(self):
        """GET / is the de-identified page; POST is 405; other paths 404; headers strict."""
        with serve(reviewed_record()) as server:
            assert server.url.startswith("http://127.0.0.1:")
            with urllib.request.urlopen(server.url, timeout=10) as response:
                body = response.read().decode("utf-8")
                headers = response.headers
            assert "no-store" == headers["Cache-Control"]
            assert "DENY" == headers["X-Frame-Options"]
            assert "De-identified copy" in body
            for identifier in ("Quentin", "MRN-00482913", "harbour-clinic-7731", "2026-10-14"):
                assert identifier not in body
            for method, path, code in (("POST", "", 405), ("DELETE", "", 405),
                                       ("GET", "record.json", 404)):
                request = urllib.request.Request(server.url + path, data=b"x" if method == "POST"
                                                 else None, method=method)
                with pytest.raises(urllib.error.HTTPError) as err:
                    urllib.request.urlopen(request, timeout=10)
                assert code == err.value.code

    def test_refuses_non_loopback_host(self):
        """Binding to a public interface needs an explicit allow_remote."""
        with pytest.raises(ValueError, match="loopback"):
            serve(reviewed_record(), host="0.0.0.0")

    def test_load_source_accepts_case_notebook_and_autosave(self, tmp_path):
        """A case dict, an exported notebook and a worksheet autosave all give a worksheet."""
        from pftwork.worksheet.storage import save_record

        record = reviewed_record()
        nb_path = export_notebook(record, tmp_path / "ws.ipynb", execute=False)
        auto = save_record(record, tmp_path / "case.pftwork.json")
        assert "harbour-clinic-7731" == load_source(invented_case()).case_id
        assert "harbour-clinic-7731" == load_source(nb_path)["case_raw"]["subject"]["id"]
        assert record.to_dict()["steps"] == load_source(auto).to_dict()["steps"]
