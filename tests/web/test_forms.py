"""Forms that keep your place: a value a page cannot use is named beside its field, on the same page, with
the form as the visitor left it; the across-assessments page offers pairable pairs first."""

from __future__ import annotations

from html.parser import HTMLParser

import pytest
from layout_assessments import recorded  # tests/web/layout_assessments.py

from foldwise.client import save

SPACE = {"logistic regression": (None, {"logisticregression__C": [0.1, 1.0]}),
         "decision tree": (None, {"max_depth": [2, 4]})}


@pytest.fixture(scope="module")
def trio():
    """Two assessments on the same outer folds (pairable) and one on other folds, all with seeded scores."""
    same = dict(n_repeats=1, n_outer=5, n_inner=3, task="classification", fold_seed=11)
    return {
        "first": recorded("first on folds A", SPACE, ["roc_auc", "accuracy"], seed=1, **same),
        "second": recorded("second on folds A", SPACE, ["roc_auc", "accuracy"], seed=2, **same),
        "other": recorded("other folds", SPACE, ["roc_auc"], n_repeats=1, n_outer=5, n_inner=3,
                          task="classification", seed=3, fold_seed=12),
    }


@pytest.fixture
def stored(trio, db_path, client):
    # Stored oldest first, so "other" is the newest: a default of "the two newest" would not pair.
    for name in ("first", "second", "other"):
        save(trio[name].payload, str(db_path))
    client.headers["accept"] = "text/html"  # as a browser asks for a page
    return trio


class _Form(HTMLParser):
    """The fields of the form with the given id: input values, selected options, and the messages shown
    beside fields (``.field-error``), by field name."""

    def __init__(self, form_id: str):
        super().__init__()
        self.form_id, self.inside, self.select = form_id, False, None
        self.values, self.errors, self.invalid, self._error_for = {}, {}, set(), None

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "form" and attrs.get("id") == self.form_id or tag == "form" and self.form_id is None:
            self.inside = True
        if not self.inside:
            return
        if attrs.get("aria-invalid") == "true":
            self.invalid.add(attrs.get("name"))
        if tag == "input" and attrs.get("type") != "checkbox":
            self.values[attrs["name"]] = attrs.get("value")
        if tag == "select":
            self.select = attrs["name"]
        if tag == "option" and "selected" in attrs:
            self.values[self.select] = attrs["value"]
        if tag == "span" and "field-error" in (attrs.get("class") or ""):
            self._error_for = attrs["id"].removesuffix("-error")
            self.errors[self._error_for] = ""

    def handle_data(self, data):
        if self._error_for:
            self.errors[self._error_for] += data

    def handle_endtag(self, tag):
        if tag == "span":
            self._error_for = None
        if tag == "form":
            self.inside = False


def _form(html: str, form_id: str | None) -> _Form:
    parser = _Form(form_id)
    parser.feed(html)
    return parser


def test_a_negative_rope_is_named_beside_its_field_and_the_comparison_still_shows(client, stored):
    uuid = stored["first"].uuid
    asked = {"a": "decision tree", "b": "logistic regression", "metric": "accuracy", "rope": "-0.5"}
    response = client.get(f"/assessments/{uuid}/compare", params=asked)
    assert response.status_code == 422 and "text/html" in response.headers["content-type"]
    form = _form(response.text, "paired-form")
    # The form as it was: the chosen candidates and metric kept, the ROPE as typed, the message beside it.
    assert form.values == {"a": "decision tree", "b": "logistic regression", "metric": "accuracy", "rope": "-0.5"}
    assert "number of 0 or more" in form.errors["rope"] and "'-0.5'" in form.errors["rope"]
    assert form.invalid == {"rope"}
    # The rest of the page is the comparison at the default ROPE, not an error page.
    assert 'id="verdict"' in response.text and "±0.01" in response.text
    empty = client.get(f"/assessments/{uuid}/compare", params=asked | {"rope": ""})
    assert empty.status_code == 200 and _form(empty.text, "paired-form").errors == {}
    # The JSON answer, and the page read by a script that does not ask for HTML, refuse the value outright,
    # located at the field.
    assert client.get(f"/api/assessments/{uuid}/compare", params=asked).status_code == 422
    scripted = client.get(f"/assessments/{uuid}/compare", params=asked, headers={"accept": "*/*"})
    assert scripted.status_code == 422 and scripted.json()["detail"][0]["loc"] == ["query", "rope"]


def test_an_unknown_candidate_is_named_beside_its_select_with_the_families_to_choose(client, stored):
    uuid = stored["first"].uuid
    response = client.get(f"/assessments/{uuid}/compare", params={"a": "forest", "b": "decision tree"})
    assert response.status_code == 422
    form = _form(response.text, "paired-form")
    assert "'forest'" in form.errors["a"] and "logistic regression, decision tree" in form.errors["a"]
    assert "[" not in form.errors["a"]  # names, not a Python list
    assert form.values["b"] == "decision tree" and form.invalid == {"a"}


@pytest.mark.parametrize("suffix", ["", "/distributions", "/fold-winners", "/optimism", "/inner", "/ranking",
                                    "/compare"])
def test_a_metric_not_recorded_is_named_beside_the_metric_select(client, stored, suffix):
    response = client.get(f"/assessments/{stored['first'].uuid}{suffix}", params={"metric": "f1"})
    assert response.status_code == 422 and 'name="metric"' in response.text
    form = _form(response.text, None)
    assert "'f1' was not recorded" in form.errors["metric"] and "roc_auc, accuracy" in form.errors["metric"]
    assert form.values["metric"] == "roc_auc"  # shown at the metric that selects, the page drawn with it


def test_an_outer_fold_out_of_range_is_named_beside_its_select(client, stored):
    response = client.get(f"/assessments/{stored['first'].uuid}/inner", params={"repeat": 0, "outer_fold": 9})
    assert response.status_code == 422
    form = _form(response.text, None)
    assert "outer_fold 9 is not in this assessment" in form.errors["outer_fold"]
    assert form.values["outer_fold"] == "0" and "Inner folds of outer fold 0" in response.text


def test_the_cost_planner_keeps_what_was_typed(client, stored):
    response = client.get(f"/assessments/{stored['first'].uuid}/cost", params={"outer": "ten", "cores": "4"})
    assert response.status_code == 422
    form = _form(response.text, None)
    assert form.values["outer"] == "ten" and "whole number from 1" in form.errors["outer"]
    assert form.values["cores"] == "4" and "cores" not in form.errors


def test_the_across_page_proposes_a_pairable_pair_first_and_says_why_others_cannot(client, stored):
    first, second, other = (stored[name].uuid for name in ("first", "second", "other"))
    form = _form(client.get("/compare").text, "compare-form")
    # The newest is "other", whose folds no one shares: the proposal is the pair on folds A.
    assert {form.values["x"], form.values["y"]} == {first, second}
    page = client.get("/compare", params={"x": other}).text
    assert "Outer folds of their own: side by side only" in page and "A paired test needs the same outer folds" in page
    # From the first: its partner is proposed, and listed before the assessments on other folds.
    page = client.get("/compare", params={"x": first}).text
    assert _form(page, "compare-form").values["y"] == second
    y_select = page.split('name="y"')[1].split("</select>")[0]
    assert y_select.index(second) < y_select.index(other)
    assert y_select.index("Same outer folds as x: paired fold by fold") < y_select.index(
        "Other outer folds: side by side only, no paired test")
    # An unpairable pair still compares side by side, and says why.
    page = client.get("/compare", params={"x": first, "y": other}).text
    assert 'id="unpaired-reason"' in page and "the folds hold different rows" in page


def test_the_across_page_keeps_its_place_on_a_metric_or_rope_it_cannot_use(client, stored):
    first, other = stored["first"].uuid, stored["other"].uuid
    response = client.get("/compare", params={"x": first, "y": other, "metric": "accuracy", "rope": "-1"})
    assert response.status_code == 422
    form = _form(response.text, "compare-form")
    assert "must be recorded in both" in form.errors["metric"] and "[" not in form.errors["metric"]
    assert "number of 0 or more" in form.errors["rope"] and form.values["rope"] == "-1"
    assert form.values["x"] == first and form.values["y"] == other
    missing = "00000000-0000-4000-8000-000000000000"
    response = client.get("/compare", params={"x": first, "y": missing})
    assert response.status_code == 404 and "in this store" in _form(response.text, "compare-form").errors["y"]


def test_error_pages_that_remain_say_what_to_do_next(client):
    response = client.get("/assessments/00000000-0000-4000-8000-000000000000", headers={"accept": "text/html"})
    assert response.status_code == 404
    assert 'id="next-step"' in response.text and "list of" in response.text and "assessments" in response.text


def test_the_save_form_is_there_only_for_the_write_key(client, stored):
    url = f"/assessments/{stored['first'].uuid}"
    assert "data-save-form" in client.get(url).text  # the client fixture sends the write key
    keyless = client.get(url, headers={"authorization": ""}).text
    assert "data-save-form" not in keyless and 'id="save-needs-write-key"' in keyless
    assert "needs the write key" in keyless and "data-save-url" not in keyless
