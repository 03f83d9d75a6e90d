from tests.api.conftest import *  # noqa
def test_x(world):
    api = world.client_for("researcher_a")
    r = api.post("/api/v1/sessions/", {"instrument": "tabletop", "account": "KES-01"}, format="json", HTTP_IDEMPOTENCY_KEY="walk-up-2031-03-04")
    print("RESULT", r.json())
