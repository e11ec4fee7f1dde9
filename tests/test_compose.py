"""docker-compose.yml is read, not run, here (no Docker engine): check its shape."""

from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parents[1]


def _compose() -> dict:
    return yaml.safe_load((ROOT / "docker-compose.yml").read_text(encoding="utf-8"))


def test_postgres_service_with_port_volume_and_healthcheck():
    doc = _compose()
    db = doc["services"]["db"]
    assert db["image"].startswith("postgres:")
    assert any(str(p).endswith(":5432") for p in db["ports"])
    # Bound to loopback only: the registry holds personal data.
    assert all(str(p).startswith("127.0.0.1:") for p in db["ports"])
    volume_names = {v.split(":", 1)[0] for v in db["volumes"]}
    assert volume_names <= set(doc["volumes"]), "service volumes must be named volumes declared below"
    assert "pg_isready" in " ".join(db["healthcheck"]["test"])
    assert db["environment"]["POSTGRES_DB"] == "linkfold"
    # The password is required from the environment, never a default committed to the repository.
    assert db["environment"]["POSTGRES_PASSWORD"].startswith("${")


def test_api_service_next_to_postgres():
    doc = _compose()
    api = doc["services"]["api"]
    # Starts only once PostgreSQL answers, and talks to it by its service name.
    assert api["depends_on"]["db"]["condition"] == "service_healthy"
    env = api["environment"]
    assert env["LINKFOLD_DATABASE_URL"].startswith("postgresql+psycopg://linkfold:${LINKFOLD_PG_PASSWORD")
    assert "@db:5432/linkfold" in env["LINKFOLD_DATABASE_URL"]
    # Reads stay closed unless a lab opens them on purpose.
    assert env["LINKFOLD_OPEN_READS"] == "false"
    # The API port is published on loopback only, like the database's: the registry holds personal data.
    assert api["ports"] == ["127.0.0.1:8750:8750"]
    assert "linkfold serve" in api["command"] and "--port 8750" in api["command"]
    assert "linkfold db upgrade" in api["command"]
    # A regular install, not an editable one: the migrations ship inside the package (.ci/run checks that a
    # built wheel carries them), so the container needs nothing of the source tree once installed.
    assert "pip install" in api["command"] and " -e " not in api["command"]
    assert "/v1/health" in " ".join(api["healthcheck"]["test"])
    # The source is mounted read-only; nothing in the container writes back into the checkout.
    assert all(v.endswith(":ro") for v in api["volumes"])
