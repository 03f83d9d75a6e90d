"""The finder page: the search form and its refusals, the two levels of results, privacy of the
hits and their thumbnails, "start from these settings", and the staff's charging report.

A constructed logbook of five closed sessions on an insulating polymer membrane, so that every
figure the page shows can be worked out by hand (below, beside each check).
"""

from __future__ import annotations

import datetime as dt
import re
from urllib.parse import urlencode

import pytest
from django.core.files.base import ContentFile
from django.core.files.storage import default_storage
from django.db import connection
from django.test.utils import CaptureQueriesContext
from django.urls import reverse

from facility.logbook.models import Assessment, Conditions, Flag, Micrograph
from facility.micrograph.assess import ANALYSIS_VERSION
from tests import factories as f
from tests.pages.conftest import NOW, open_session

pytestmark = pytest.mark.django_db

QUERY = {
    "material_class": "polymer",
    "conductivity": "insulating",
    "form": "membrane",
    "feature_size_nm": "50",
}
# A tiny valid PNG (1 × 1 px, grey), as the pipeline stores thumbnails.
PNG = bytes.fromhex(
    "89504e470d0a1a0a0000000d4948445200000001000000010800000000"
    "3a7e9b550000000a49444154789c63680000000201013f2e21b60000000049454e44ae426082"
)


def _session(fac, n, *, user, account, feature, coating, vacuum, kv, wd, detector, charging):
    specimen = f.SpecimenFactory(
        name=f"membrane {n}",
        material="track-etched polycarbonate",
        material_class="polymer",
        conductivity="insulating",
        form="membrane",
        feature_size_nm=feature,
        owner=user,
        group=account.group,
    )
    coat = None
    if coating:
        coat = f.CoatingFactory(specimen=specimen, material=coating[0], thickness_nm=coating[1])
    start = NOW - dt.timedelta(days=40 - n)
    session = f.InstrumentSessionFactory(
        instrument=fac.sem,
        operator=user,
        account=account,
        specimen=specimen,
        coating=coat,
        vacuum_mode=vacuum,
        started_at=start,
        ended_at=start + dt.timedelta(hours=2),
    )
    Conditions.objects.create(
        session=session, accelerating_voltage_kv=kv, working_distance_mm=wd, detector=detector
    )
    micrograph = Micrograph.objects.create(
        session=session,
        sha256=f"{n:064d}",
        state="done",
        original_name=f"field-{n}.tif",
        thumbnail=default_storage.save(f"thumbnails/{n}.png", ContentFile(PNG)),
    )
    Assessment.objects.create(
        micrograph=micrograph,
        analysis_version=ANALYSIS_VERSION,
        charging_score=0.9 if charging else 0.05,
    )
    if charging:
        Flag.objects.create(session=session, code="charging", severity="problem", message="x")
    return session


@pytest.fixture
def logbook(facility, frozen):
    """Feature sizes set so the order by closeness on a log scale is plain (criteria.py: full
    weight at the same size, none a decade away): 50, 45, 100, 200, 500 nm."""
    fa = facility
    b = {"user": fa.researcher_b, "account": fa.account_b}
    s = {
        "b_coated": _session(
            fa, 1, **b, feature=50, coating=("Au-Pd", 5), vacuum="high", kv=2, wd=4,
            detector="SE", charging=False,
        ),
        "a_own": _session(
            fa, 2, user=fa.researcher_a, account=fa.account_a, feature=45, coating=None,
            vacuum="low", kv=3, wd=6, detector="SE", charging=False,
        ),
        "b_charged_15": _session(
            fa, 3, **b, feature=100, coating=None, vacuum="high", kv=15, wd=10,
            detector="SE", charging=True,
        ),
        "b_charged_10": _session(
            fa, 4, **b, feature=200, coating=None, vacuum="high", kv=10, wd=10,
            detector="SE", charging=True,
        ),
        # The commercial client does not share details, but counts (anonymised) in summaries.
        "client": _session(
            fa, 5, user=fa.client, account=fa.client_account, feature=500, coating=None,
            vacuum="low", kv=5, wd=8, detector="BSE", charging=False,
        ),
    }  # fmt: skip
    return s


def _find(client, **extra):
    return client.get(reverse("finder"), {**QUERY, **extra})


def _text(response) -> str:
    return re.sub(r"\s+", " ", response.content.decode())


def test_the_empty_page_shows_only_the_form(as_user, facility):
    response = as_user(facility.researcher_a).get(reverse("finder"))
    assert response.status_code == 200
    body = _text(response)
    assert 'name="material_class"' in body and 'id="summary"' not in body
    assert "Please correct" not in body


def test_summary_of_what_worked_and_what_failed(as_user, facility, logbook):
    response = _find(as_user(facility.researcher_a))
    assert response.status_code == 200
    body = _text(response)
    # Five similar sessions; three analysed without flags, two with charging (hand count).
    assert "5 similar sessions in the facility: 3 with images that were not flagged, 2 with" in body
    # Voltages of the three that worked: 2, 3 and 5 kV: median 3, range 2–5 (hand-computed).
    assert re.search(r"Accelerating voltage</th><td>3 kV</td><td>2–5 kV</td><td>3</td>", body)
    # Working distances 4, 6 and 8 mm: median 6 (hand-computed).
    assert re.search(r"Working distance</th><td>6 mm</td><td>4–8 mm</td><td>3</td>", body)
    # Detectors SE, SE, BSE; vacuum low, high, low; two uncoated and one Au-Pd (hand count).
    assert "SE (2), BSE (1)" in body
    assert "Low vacuum / variable pressure (2), High vacuum (1)" in body
    assert "uncoated (2), Au-Pd (1)" in body
    # Both charging cases: uncoated, high vacuum, above the 5 kV at most that worked.
    assert "2 of 2 charging cases were uncoated, in high vacuum and above 5 kV." in body


def test_hits_in_order_with_why_they_matched(as_user, facility, logbook):
    body = _text(_find(as_user(facility.researcher_a)))
    order = [m for m in re.findall(r"membrane \d|A session of another group", body)]
    # Closeness on a log scale to 50 nm: 50, 45, 100, 200, 500 nm (log10 distances 0, 0.05,
    # 0.30, 0.60, 1.0; hand-computed).
    assert order == ["membrane 1", "membrane 2", "membrane 3", "membrane 4",
                     "A session of another group"]  # fmt: skip
    assert "same material class (polymer)" in body
    assert "features 45 nm (you: 50 nm)" in body
    assert "worked: no image flagged" in body and ">charging</span>" in body


def test_anonymised_hits_show_conditions_and_outcome_only(as_user, facility, logbook):
    client_session = logbook["client"]
    body = _text(_find(as_user(facility.researcher_a)))
    hit = body[body.index("A session of another group") :]
    hit = hit[: hit.index("</li>")]
    assert "5 kV, WD 8 mm, BSE" in hit and "uncoated" in hit
    assert "worked: no image flagged" in hit
    for private in ("membrane 5", "track-etched", "Quillfen", facility.client.username, "<img"):
        assert private not in hit, private
    thumb = client_session.micrographs.get().pk
    assert reverse("finder-thumbnail", args=[thumb]) not in body


def test_visible_hits_show_details_and_their_thumbnails(as_user, facility, logbook):
    client = as_user(facility.researcher_a)
    body = _text(_find(client))
    shared = logbook["b_coated"].micrographs.get().pk
    own = logbook["a_own"]
    assert reverse("finder-thumbnail", args=[shared]) in body
    assert "Larchmoor polymer group" in body  # a sharing group's hit names its group
    # Only one's own groups' hits link to their session page (the others would be a 404).
    assert reverse("session-detail", args=[own.pk]) in body
    assert reverse("session-detail", args=[logbook["b_coated"].pk]) not in body
    response = client.get(reverse("finder-thumbnail", args=[shared]))
    assert response.status_code == 200 and b"".join(response.streaming_content) == PNG


def test_thumbnail_of_a_group_that_does_not_share_is_not_found(as_user, facility, logbook):
    hidden = logbook["client"].micrographs.get().pk
    url = reverse("finder-thumbnail", args=[hidden])
    assert as_user(facility.researcher_a).get(url).status_code == 404
    assert as_user(facility.client).get(url).status_code == 200  # their own
    assert as_user(facility.manager).get(url).status_code == 200


@pytest.mark.parametrize(
    ("extra", "field", "words"),
    [
        ({"feature_size_nm": "-5"}, "feature_size_nm", "A size in nm, more than 0."),
        ({"material_class": "cheese"}, "material_class", "Select a valid choice."),
    ],
)
def test_invalid_input_is_shown_beside_the_field(as_user, facility, extra, field, words):
    response = _find(as_user(facility.researcher_a), **extra)
    assert response.status_code == 400
    body = _text(response)
    assert f'id="id_{field}_error"' in body and words in body
    assert 'id="summary"' not in body


def test_a_search_with_nothing_described_is_refused_in_words(as_user, facility):
    response = as_user(facility.researcher_a).get(reverse("finder"), {"text": "", "form": ""})
    assert response.status_code == 400
    assert "Describe the specimen: give at least one attribute or some text." in _text(response)


def test_start_from_these_settings_copies_the_suggestion(as_user, facility, logbook):
    session = open_session(facility)
    client = as_user(facility.researcher_a)
    page = _text(_find(client))
    assert "Copy into the session log" in page
    response = client.post(f"{reverse('finder-start')}?{urlencode(QUERY)}", {"session": session.pk})
    assert response.status_code == 302
    assert response["Location"] == reverse("session-detail", args=[session.pk]) + "#conditions"
    row = Conditions.objects.get(session=session)
    # The medians and the most common choices of the three that worked (see the summary test).
    assert row.source == "suggested" and row.label == "Finder suggestion"
    assert (row.accelerating_voltage_kv, row.working_distance_mm) == (3.0, 6.0)
    assert (row.detector, row.vacuum_mode) == ("SE", "low")


def test_start_refuses_someone_elses_session_and_writes_nothing(as_user, facility, logbook):
    theirs = open_session(facility, operator=facility.researcher_b, account=facility.account_b)
    client = as_user(facility.researcher_a)
    response = client.post(f"{reverse('finder-start')}?{urlencode(QUERY)}", {"session": theirs.pk})
    assert response.status_code == 302 and response["Location"].startswith(reverse("finder"))
    assert not Conditions.objects.filter(session=theirs).exists()
    follow = client.get(response["Location"])
    assert "Choose one of your open sessions" in _text(follow)


def test_start_without_an_open_session_says_to_check_in(as_user, facility, logbook):
    body = _text(_find(as_user(facility.researcher_a)))
    assert "Check in at an instrument, then come back" in body
    assert "Copy into the session log" not in body


def test_start_is_post_only(as_user, facility):
    assert as_user(facility.researcher_a).get(reverse("finder-start")).status_code == 405


def test_review_link_prefills_the_session_conditions_form(as_user, facility, logbook):
    session = open_session(facility)
    client = as_user(facility.researcher_a)
    body = _text(_find(client))
    link = re.search(rf'href="(/sessions/{session.pk}/\?suggested=1[^"]*)"', body)
    assert link, "no review link"
    page = _text(client.get(link.group(1).replace("&amp;", "&")))
    assert "Filled in from the finder" in page
    assert re.search(r'name="cond-accelerating_voltage_kv" value="3\.0"', page)
    assert re.search(r'name="cond-detector" value="SE"', page)
    assert not Conditions.objects.filter(session=session).exists()  # nothing logged by looking


def test_prefill_ignores_values_the_form_would_refuse(as_user, facility):
    session = open_session(facility)
    url = reverse("session-detail", args=[session.pk])
    page = _text(
        as_user(facility.researcher_a).get(
            url, {"suggested": "1", "cond-accelerating_voltage_kv": "lots", "cond-detector": "SE"}
        )
    )
    assert 'name="cond-detector" value="SE"' in page
    assert 'name="cond-accelerating_voltage_kv" value="lots"' not in page
    assert "cond-accelerating_voltage_kv_error" not in page


# Pinned: sign-in session and user (2), the navigation's facts (1), the person's groups (2: the
# finder's pool and privacy, the logbook's scoping), the accounts the finder may draw on (1), the
# finder's digest (1: loaded on first use, then one catch-up query of what changed), candidates
# with their conditions and failure flags (3), the details of the hits shown (1), thumbnails (1),
# which hits link to a session page (1), the person's open sessions (1).
FINDER_QUERIES = 14


def test_finder_page_query_count_is_pinned(as_user, facility, logbook, django_assert_num_queries):
    client = as_user(facility.researcher_a)
    with django_assert_num_queries(FINDER_QUERIES):
        assert _find(client).status_code == 200


def test_finder_query_count_does_not_grow_with_hits(as_user, facility, logbook):
    client = as_user(facility.researcher_a)
    for n in range(6, 16):
        _session(
            facility, n, user=facility.researcher_b, account=facility.account_b, feature=60,
            coating=None, vacuum="low", kv=4, wd=5, detector="SE", charging=False,
        )  # fmt: skip
    with CaptureQueriesContext(connection) as queries:
        assert _find(client).status_code == 200
    assert len(queries) == FINDER_QUERIES


def test_charging_report_is_for_staff(as_user, facility, logbook):
    url = reverse("charging-report")
    for persona in ("researcher_a", "leader_a", "client"):
        assert as_user(getattr(facility, persona)).get(url).status_code == 403
    response = as_user(facility.manager).get(url)
    assert response.status_code == 200
    body = _text(response)
    assert "<svg" in body and "<?xml" not in body
    # Insulating, uncoated, high vacuum: the 10 kV and the 15 kV session both charged, each in
    # its band (10–20 kV); the coated one at 2 kV did not (hand count from the logbook above).
    assert re.search(r"insulating</td><td>uncoated</td><td>High vacuum</td><td>10–20 kV</td>"
                     r"<td>2</td><td>2</td><td>100 %</td>", body)  # fmt: skip
    assert re.search(r"insulating</td><td>coated</td><td>High vacuum</td><td>2–5 kV</td>"
                     r"<td>1</td><td>0</td><td>0 %</td>", body)  # fmt: skip


def test_charging_report_without_analysed_sessions(as_user, facility):
    body = _text(as_user(facility.manager).get(reverse("charging-report")))
    assert "No analysed sessions yet" in body and "<svg" not in body
