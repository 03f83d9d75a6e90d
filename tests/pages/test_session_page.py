"""The session page: scoping, logging the setup, fault reports, uploads, flags, dismissals."""

from __future__ import annotations

import pytest
from django.urls import reverse

from facility.logbook.models import AnalysisState, Conditions, Flag, Micrograph, Severity
from facility.people.models import Notification
from tests import factories as f
from tests.logbook import images
from tests.pages.conftest import at, closed_session, open_session

pytestmark = pytest.mark.django_db


@pytest.fixture
def session(facility, frozen):
    return open_session(facility)


def _specimen(client, session, **extra):
    data = {
        "new-name": "Anodised alumina",
        "new-material": "porous alumina",
        "new-material_class": "ceramic",
        "new-conductivity": "insulating",
        "new-form": "membrane",
        **extra,
    }
    return client.post(reverse("session-specimen", args=[session.pk]), data)


def test_who_sees_the_session_page(as_user, facility, session):
    url = reverse("session-detail", args=[session.pk])
    operator = as_user(facility.researcher_a).get(url)
    assert operator.status_code == 200
    form_action = f'action="{reverse("session-conditions", args=[session.pk])}"'
    assert form_action in operator.content.decode()
    leader = as_user(facility.leader_a).get(url)  # same group: may read, not write
    assert leader.status_code == 200
    assert form_action not in leader.content.decode()
    assert as_user(facility.manager).get(url).status_code == 200
    assert as_user(facility.researcher_b).get(url).status_code == 404
    assert as_user(facility.client).get(url).status_code == 404
    assert (
        as_user(facility.researcher_b).get(reverse("session-live", args=[session.pk])).status_code
        == 404
    )


def test_writes_by_a_reader_are_403_and_write_nothing(as_user, facility, session):
    leader = as_user(facility.leader_a)
    assert _specimen(leader, session).status_code == 403
    response = leader.post(
        reverse("session-conditions", args=[session.pk]), {"cond-accelerating_voltage_kv": "5"}
    )
    assert response.status_code == 403
    assert Conditions.objects.count() == 0
    assert _specimen(as_user(facility.researcher_b), session).status_code == 404


def test_specimen_coating_and_conditions_raise_the_charging_risk(as_user, facility, session):
    client = as_user(facility.researcher_a)
    assert _specimen(client, session).status_code == 302
    response = client.post(
        reverse("session-coating", args=[session.pk]),
        {"coat-material": "none", "coat-thickness_nm": "", "coat-method": "none"},
    )
    assert response.status_code == 302
    response = client.post(
        reverse("session-conditions", args=[session.pk]),
        {"cond-accelerating_voltage_kv": "15", "cond-working_distance_mm": "8"},
    )
    assert response.status_code == 302
    page = client.get(reverse("session-detail", args=[session.pk])).content.decode()
    # An uncoated insulator at 15 kV in high vacuum, above E2 ≈ 3 keV for oxides (Joy & Joy,
    # Micron 27 (1996) 247, as DOMAIN.md quotes it): the page shows the risk and what to change.
    assert "Charging risk" in page
    assert "What to change" in page and "Lower the accelerating voltage from 15 kV" in page
    assert "Evidence" in page and "voltage kv" in page
    assert "Anodised alumina" in page and "uncoated" in page


def test_refused_settings_are_shown_and_nothing_is_logged(as_user, facility, session):
    client = as_user(facility.researcher_a)
    response = client.post(
        reverse("session-conditions", args=[session.pk]),
        {"cond-accelerating_voltage_kv": "500"},  # beyond any SEM or TEM (DOMAIN.md: ≤ 300 kV)
    )
    text = response.content.decode()
    assert response.status_code == 400
    assert "Some settings are out of range" in text
    assert "Must be between 0.01 and 300 kV." in text
    assert Conditions.objects.count() == 0
    response = client.post(reverse("session-conditions", args=[session.pk]), {})
    assert response.status_code == 400 and "Enter at least one setting" in response.content.decode()
    # Coating before any specimen: the service's words, at the coating form.
    response = client.post(
        reverse("session-coating", args=[session.pk]),
        {"coat-material": "Au", "coat-thickness_nm": "5", "coat-method": "sputter"},
    )
    assert response.status_code == 400
    assert "Record the specimen before its coating" in response.content.decode()


def test_conditions_are_prefilled_from_my_last_session_here(as_user, facility, frozen):
    earlier = closed_session(facility, at(4, 9), 2.0)
    f.ConditionsFactory(session=earlier, accelerating_voltage_kv=2.5, working_distance_mm=4.2)
    current = open_session(facility)
    page = as_user(facility.researcher_a).get(reverse("session-detail", args=[current.pk]))
    text = page.content.decode()
    assert 'name="cond-accelerating_voltage_kv" value="2.5"' in text
    assert 'name="cond-working_distance_mm" value="4.2"' in text
    assert "Filled in from the last conditions you logged" in text


def test_settings_and_notes(as_user, facility, session):
    client = as_user(facility.researcher_a)
    client.post(
        reverse("session-settings", args=[session.pk]),
        {"set-vacuum_mode": "low", "set-notes": "Stub 3 of 5."},
    )
    session.refresh_from_db()
    assert (session.vacuum_mode, session.notes) == ("low", "Stub 3 of 5.")
    # The test instrument offers high and low vacuum only (factories.InstrumentFactory).
    response = client.post(
        reverse("session-settings", args=[session.pk]), {"set-vacuum_mode": "environmental"}
    )
    assert response.status_code == 400


def test_a_fault_report_tells_the_staff_once(as_user, facility, session):
    client = as_user(facility.researcher_a)
    url = reverse("session-fault", args=[session.pk])
    response = client.post(url, {"fault-fault_report": "Stage stuck at tilt 20°."}, follow=True)
    assert "Fault reported; 1 staff member told." in response.content.decode()
    note = Notification.objects.get(user=facility.manager)
    assert "Field-emission SEM" in note.subject and "Stage stuck" in note.body
    assert note.link == reverse("session-detail", args=[session.pk])
    client.post(url, {"fault-fault_report": "Stage stuck at tilt 20°."})
    assert Notification.objects.filter(user=facility.manager).count() == 1
    session.refresh_from_db()
    assert session.fault_report == "Stage stuck at tilt 20°."
    assert Notification.objects.filter(user=facility.researcher_a).count() == 0


def test_uploading_two_images_shows_thumbnails_and_flags(
    as_user, facility, session, django_capture_on_commit_callbacks
):
    client = as_user(facility.researcher_a)
    files = [
        images.upload(images.tiff_bytes(images.clean()), "clean.tif"),
        images.upload(images.tiff_bytes(images.charged()), "charged.tif"),
    ]
    # Analysis is queued on commit; here it runs in-process when the request's writes commit.
    with django_capture_on_commit_callbacks(execute=True):
        response = client.post(
            reverse("session-upload", args=[session.pk]),
            {"files": files},
            headers={"Accept": "application/json"},
        )
    assert response.status_code == 200
    results = response.json()["results"]
    assert [r["ok"] for r in results] == [True, True]
    assert Micrograph.objects.filter(state=AnalysisState.DONE).count() == 2  # eager analysis
    live = client.get(reverse("session-live", args=[session.pk])).content.decode()
    for m in Micrograph.objects.all():
        assert reverse("micrograph-thumbnail", args=[m.pk]) in live
    assert 'data-pending="0"' in live
    charging = session.flags.get(code="charging")
    assert f'id="flag-{charging.pk}"' in live and "charged.tif" in live
    # The operator is told about the new problem, with a link back to this page.
    note = Notification.objects.get(user=facility.researcher_a)
    assert note.link == reverse("session-detail", args=[session.pk])
    assert (
        as_user(facility.researcher_a)
        .get(reverse("micrograph-thumbnail", args=[Micrograph.objects.first().pk]))
        .status_code
        == 200
    )


def test_a_bad_file_is_refused_in_words(as_user, facility, session):
    client = as_user(facility.researcher_a)
    response = client.post(
        reverse("session-upload", args=[session.pk]),
        {"files": [images.upload(b"%PDF-1.7 not an image", "notes.pdf")]},
        headers={"Accept": "application/json"},
    )
    assert response.status_code == 415
    assert "not a TIFF, PNG or JPEG" in response.json()["results"][0]["message"]
    # Without script the same refusal arrives as a message on the page.
    response = client.post(
        reverse("session-upload", args=[session.pk]),
        {"files": [images.upload(b"%PDF-1.7 not an image", "notes.pdf")]},
        follow=True,
    )
    assert "notes.pdf: notes.pdf is not a TIFF, PNG or JPEG" in response.content.decode()
    assert Micrograph.objects.count() == 0
    leader = as_user(facility.leader_a)
    response = leader.post(
        reverse("session-upload", args=[session.pk]),
        {"files": [images.upload(images.tiff_bytes(images.clean()), "x.tif")]},
    )
    assert response.status_code == 403
    assert Micrograph.objects.count() == 0


@pytest.fixture
def flagged(session):
    return Flag.objects.create(
        session=session,
        code="charging",
        severity=Severity.PROBLEM,
        message="Charging in 1 of 1 images.",
        evidence={"images": [], "count": 1, "of": 1},
        remedies=["Lower the voltage."],
    )


def test_dismissing_a_flag_needs_a_reason(as_user, facility, flagged):
    client = as_user(facility.researcher_a)
    url = reverse("flag-dismiss", args=[flagged.pk])
    response = client.post(url, {f"flag{flagged.pk}-reason": ""})
    assert response.status_code == 400
    assert f'id="id_flag{flagged.pk}-reason_error"' in response.content.decode()
    flagged.refresh_from_db()
    assert not flagged.is_dismissed
    assert (
        as_user(facility.researcher_b).post(url, {f"flag{flagged.pk}-reason": "x"}).status_code
        == 404
    )
    assert (
        as_user(facility.leader_a).post(url, {f"flag{flagged.pk}-reason": "x"}).status_code == 403
    )
    response = client.post(
        url, {f"flag{flagged.pk}-reason": "Edge of the stub; not the specimen."}, follow=True
    )
    text = response.content.decode()
    assert "dismissed" in text and "Edge of the stub; not the specimen." in text
    flagged.refresh_from_db()
    assert flagged.dismissed_by == facility.researcher_a


def test_session_page_query_count_is_pinned(
    as_user, facility, session, flagged, django_assert_num_queries
):
    f.ConditionsFactory(session=session)
    specimen = f.SpecimenFactory(owner=facility.researcher_a, group=facility.group_a)
    session.specimen = specimen
    session.coating = f.CoatingFactory(specimen=specimen)
    session.save()
    for n in range(3):
        Micrograph.objects.create(session=session, sha256=f"{n:064d}", original_name=f"{n}.tif")
    client = as_user(facility.researcher_a)
    url = reverse("session-detail", args=[session.pk])
    # session + user, viewer's group ids, the session (with specimen and coating), conditions,
    # micrographs, their assessments, flags, last conditions, operator's group ids, unread count,
    # the group's specimens (exists, then the options). Three images or thirty: the same number.
    with django_assert_num_queries(13):
        assert client.get(url).status_code == 200


def test_choosing_a_specimen_the_group_logged_before(as_user, facility, session):
    ours = f.SpecimenFactory(
        name="Sintered zirconia", owner=facility.leader_a, group=facility.group_a
    )
    theirs = f.SpecimenFactory(name="PLA film", owner=facility.researcher_b, group=facility.group_b)
    client = as_user(facility.researcher_a)
    page = client.get(reverse("session-detail", args=[session.pk])).content.decode()
    assert "Sintered zirconia" in page and "PLA film" not in page
    url = reverse("session-specimen", args=[session.pk])
    response = client.post(url, {"pick-specimen": theirs.pk})
    assert response.status_code == 400 and "Select a valid choice" in response.content.decode()
    session.refresh_from_db()
    assert session.specimen is None
    assert client.post(url, {"pick-specimen": ours.pk}).status_code == 302
    session.refresh_from_db()
    assert session.specimen == ours
