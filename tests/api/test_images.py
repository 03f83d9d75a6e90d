"""Micrographs through the API: upload (201 new, 200 same bytes), limits, analysis, downloads."""

from __future__ import annotations

import datetime as dt

from django.core.files.uploadedfile import SimpleUploadedFile
from rest_framework.test import APIClient

from api import tokens
from facility.logbook.models import Micrograph
from tests.api.conftest import small_tiff


def tif(data: bytes, name: str = "cell.tif") -> SimpleUploadedFile:
    return SimpleUploadedFile(name, data, "image/tiff")


def upload(api, session, data: bytes, **fields):
    return api.post(
        f"/api/v1/sessions/{session.pk}/micrographs/",
        {"file": tif(data), **fields},
        format="multipart",
    )


def test_same_bytes_twice_is_the_same_micrograph(world):
    api = world.client_for("researcher_a")
    first = upload(api, world.a.session, small_tiff(41), accelerating_voltage_kv="3")
    again = upload(api, world.a.session, small_tiff(41))
    assert (first.status_code, again.status_code) == (201, 200)
    assert first.json()["id"] == again.json()["id"]
    assert Micrograph.objects.filter(session=world.a.session).count() == 2  # seeded one + this
    made = Micrograph.objects.get(pk=first.json()["id"])
    assert made.conditions.accelerating_voltage_kv == 3.0


def test_refusals_of_uploads(world, settings):
    api = world.client_for("researcher_a")
    s = world.a.session
    not_image = upload(api, s, b"%PDF-1.7 this is a report")
    assert (not_image.status_code, not_image.json()["error"]["code"]) == (415, "unsupported_type")
    bad_conditions = upload(api, s, small_tiff(42), accelerating_voltage_kv="-1")
    assert bad_conditions.status_code == 400
    assert "accelerating_voltage_kv" in bad_conditions.json()["error"]["fields"]
    no_file = api.post(f"/api/v1/sessions/{s.pk}/micrographs/", {}, format="multipart")
    assert no_file.status_code == 400 and "file" in no_file.json()["error"]["fields"]
    json_body = api.post(f"/api/v1/sessions/{s.pk}/micrographs/", {"file": "x"}, format="json")
    assert json_body.status_code == 415
    settings.UPLOAD_MAX_BYTES = 1000
    too_big = upload(api, s, small_tiff(43))
    assert (too_big.status_code, too_big.json()["error"]["code"]) == (413, "too_large")
    assert Micrograph.objects.filter(session=s).count() == 1  # only the seeded one


def test_declared_length_over_the_limit_is_refused_before_reading(world, settings):
    settings.UPLOAD_MAX_BYTES = 10
    api = world.client_for("researcher_a")
    answer = api.generic(
        "POST",
        f"/api/v1/sessions/{world.a.session.pk}/micrographs/",
        b"",
        content_type="multipart/form-data; boundary=x",
        CONTENT_LENGTH=str(5 * 1024 * 1024),
    )
    assert answer.status_code == 413


def test_upload_is_analysed_and_served(world, django_capture_on_commit_callbacks):
    api = world.client_for("researcher_a")
    data = small_tiff(44)
    with django_capture_on_commit_callbacks(execute=True):
        made = upload(api, world.a.session, data).json()
    detail = api.get(f"/api/v1/micrographs/{made['id']}/").json()
    assert detail["state"] == "done", detail["failure_reason"]
    assert detail["thumbnail_url"].endswith("/thumbnail/")
    assessment = api.get(f"/api/v1/micrographs/{made['id']}/assessment/")
    assert assessment.status_code == 200 and assessment.json()["resolution_px"] is not None
    thumb = api.get(detail["thumbnail_url"])
    assert thumb["Content-Type"] == "image/png"
    assert b"".join(thumb.streaming_content)[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (RFC 2083)
    original = api.get(detail["original_url"])
    assert b"".join(original.streaming_content) == data
    assert original["Content-Disposition"].startswith("attachment;")
    assert original["X-Content-Type-Options"] == "nosniff"


def test_no_assessment_yet_is_404(world):
    api = world.client_for("researcher_a")
    made = upload(api, world.a.session, small_tiff(45)).json()  # analysis not run: pending
    answer = api.get(f"/api/v1/micrographs/{made['id']}/assessment/")
    assert answer.status_code == 404 and "pending" in answer.json()["error"]["message"]


def test_late_upload_to_a_long_closed_session_is_refused(world, clock):
    s = world.a.session
    api = world.client_for("researcher_a")
    api.post(f"/api/v1/sessions/{s.pk}/check-out/", {}, format="json")
    clock.shift(dt.timedelta(days=2))
    answer = upload(api, s, small_tiff(46))
    assert (answer.status_code, answer.json()["error"]["code"]) == (409, "closed")


def test_instrument_pc_token_reaches_only_its_instrument(world):
    fa = world.facility
    secret = tokens.create_instrument_token(instrument=fa.sem, name="PC", by=fa.manager).secret
    pc = APIClient()
    pc.credentials(HTTP_AUTHORIZATION=f"Bearer {secret}")
    assert upload(pc, world.a.session, small_tiff(47)).status_code == 201
    # B's open session is on another instrument: invisible to this token, though its owner is staff.
    assert upload(pc, world.b.session, small_tiff(48)).status_code == 404
    assert (
        pc.post(
            "/api/v1/instruments/vp-sem/micrographs/",
            {"file": tif(small_tiff(49))},
            format="multipart",
        ).status_code
        == 404
    )
    assert pc.get("/api/v1/sessions/").status_code == 403  # upload only: no reading
    assert pc.post(f"/api/v1/sessions/{world.a.session.pk}/check-out/").status_code == 403
    assert pc.get("/api/v1/me/").json()["token"]["instrument"] == "fe-sem"


def test_a_bound_read_token_sees_one_instrument(world):
    bound = tokens.create_token(
        user=world.facility.manager,
        name="vp-sem usage",
        scopes=["read"],
        instrument=world.b.instrument,
    ).secret
    api = APIClient()
    api.credentials(HTTP_AUTHORIZATION=f"Bearer {bound}")
    sessions = api.get("/api/v1/sessions/").json()["results"]
    assert {s["instrument"] for s in sessions} == {"vp-sem"}
    assert [i["code"] for i in api.get("/api/v1/instruments/").json()["results"]] == ["vp-sem"]
    assert api.get(f"/api/v1/sessions/{world.a.session.pk}/").status_code == 404
    assert api.get(f"/api/v1/micrographs/{world.a.micrograph.pk}/original/").status_code == 404


def test_uploads_are_throttled_per_token(world, settings):
    settings.REST_FRAMEWORK = {
        **settings.REST_FRAMEWORK,
        "DEFAULT_THROTTLE_RATES": {"token_creation": "20/hour", "uploads": "2/minute"},
    }
    api = world.client_for("upload_token")
    codes = [upload(api, world.a.session, small_tiff(50 + n)).status_code for n in range(3)]
    assert codes == [201, 201, 429]
    # Another caller has a budget of its own.
    assert (
        upload(world.client_for("researcher_a"), world.a.session, small_tiff(60)).status_code == 201
    )
