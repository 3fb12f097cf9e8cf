"""The index and the assessment page, rendered on the server."""

from __future__ import annotations

import re


def _push(client, assessment):
    response = client.post("/api/assessments", content=assessment.payload.model_dump_json(),
                           headers={"content-type": "application/json"})
    assert response.status_code == 201


def test_index_lists_the_assessment_with_its_estimate(client, small_assessment):
    _push(client, small_assessment)
    page = client.get("/").text
    assert "breast cancer, two families" in page
    assert "3 outer × 3 inner" in page
    estimate = small_assessment.nested_estimate
    pm = '<abbr class="pm" title="± one standard deviation over the outer folds">±</abbr>'  # ± defined on the page
    assert f"{estimate.mean:.3f} {pm} {estimate.sd:.3f}" in page
    assert "external validation" in page  # the caution is on every page


def test_index_filters_by_dataset_and_name(client, small_assessment):
    _push(client, small_assessment)
    assert "breast cancer, two families" in client.get("/", params={"dataset": "BREAST"}).text
    page = client.get("/", params={"name": "no such"}).text
    assert "No assessment matches this filter." in page


def test_empty_index_says_how_to_start(client):
    assert "No assessments yet" in client.get("/").text


def test_assessment_page_shows_every_fold_winner(client, small_assessment):
    _push(client, small_assessment)
    page = client.get(f"/assessments/{small_assessment.uuid}").text
    table = page.split('id="fold-winners"')[1].split("</table>")[0]
    assert len(re.findall(r"<tr>", table.split("<tbody>")[1])) == len(small_assessment.winners)
    for score in small_assessment.winners["outer_score"]:
        assert f"{score:.3f}" in table
    assert "Nested estimate" in page


def test_assessment_page_keeps_the_metric_in_the_query(client, small_assessment):
    _push(client, small_assessment)
    page = client.get(f"/assessments/{small_assessment.uuid}", params={"metric": "accuracy"}).text
    assert '<option value="accuracy" selected>' in page


def test_unknown_assessment_page_is_a_readable_404(client):
    response = client.get("/assessments/missing", headers={"accept": "text/html"})
    assert response.status_code == 404
    assert "no assessment" in response.text
