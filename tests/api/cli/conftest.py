"""The command line on the test's store, reachable by URL as a user's shell reaches it."""

from __future__ import annotations

from urllib.parse import quote

import pytest


@pytest.fixture
def cli_url(store, monkeypatch, tmp_path):
    """The store, reachable by URL from the command line.

    The commands run in this process: the engines they make are disposed of afterwards (a
    command's process would close its connections by ending).
    """
    import beamaudit.api.store as store_module

    made = []
    make_engine = store_module.make_engine
    monkeypatch.setattr(
        store_module, "make_engine", lambda *a, **k: made.append(make_engine(*a, **k)) or made[-1]
    )
    url = store.url
    if store.backend == "postgresql":  # the test's own schema, as the store's engine uses it
        url += "?options=" + quote(str(store.connect_args["options"]))
    monkeypatch.setenv("BEAMAUDIT_DATABASE_URL", url)
    monkeypatch.setenv("BEAMAUDIT_SECRET_KEY_PATH", str(tmp_path / "secret.key"))
    monkeypatch.delenv("BEAMAUDIT_CONFIG", raising=False)
    yield store
    for engine in made:
        engine.dispose()
