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
