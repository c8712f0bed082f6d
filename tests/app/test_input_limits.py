"""Inputs that used to slip through: non-finite numbers, control characters in names, a label
set of any size."""

from __future__ import annotations

import pytest
from pydantic import ValidationError

from app.models import Corpus
from app.services import corpora as svc
from app.services.errors import BadInput
from app.services.exports import SplitSpec
from app.settings import Settings
from tests.app.bench_helpers import make_corpus


@pytest.mark.parametrize("value", ["NaN", "Infinity", "-Infinity"])
def test_input_limits_corpus_setting_refuses_non_finite_over_the_api(
    login, db, people, value
) -> None:
    corpus, _ = make_corpus(db, ["the tide turned ."])
    admin = login("admin")
    # Python's json (and so the server) reads the bare words NaN and Infinity
    resp = admin.client.patch(
        f"/api/corpora/{corpus.id}",
        content=('{"settings": {"max_f1_drop": ' + value + "}}"),
        headers={**admin.headers(), "Content-Type": "application/json"},
    )
    assert resp.status_code == 422, resp.text
    assert "not a number" in resp.text or "finite" in resp.text
    db.expire_all()
    assert db.get(Corpus, corpus.id).options.max_f1_drop == 0.01


def test_input_limits_corpus_setting_refuses_nan_on_the_page(login, db, people) -> None:
    corpus, _ = make_corpus(db, ["the tide turned ."])
    admin = login("admin")
    resp = admin.client.post(
        f"/corpora/{corpus.id}/settings",
        data={"csrf_token": admin.csrf, "max_f1_drop": "nan", "annotators_per_sentence": "2"},
    )
    assert resp.status_code == 422
    assert "not a number" in resp.text or "finite" in resp.text
    db.expire_all()
    assert db.get(Corpus, corpus.id).options.max_f1_drop == 0.01


def test_input_limits_split_ratios_refuse_non_finite(login, db, people) -> None:
    with pytest.raises(BadInput, match="finite"):
        SplitSpec((float("inf"), 0.1, 0.1))
    corpus, _ = make_corpus(db, ["the tide turned ."])
    adj = login("adj")
    assert (
        adj.client.get(f"/api/corpora/{corpus.id}/export?train=inf&dev=0&test=0").status_code == 422
    )


def test_input_limits_service_setting_refuses_nan() -> None:
    with pytest.raises(ValidationError, match="finite"):
        Settings(login_delay_seconds=float("nan"))


@pytest.mark.parametrize("name", ["Tide\x00log", "Tide\x1blog", "Tide\x7flog"])
def test_input_limits_corpus_name_refuses_control_characters(login, db, people, name) -> None:
    admin = login("admin")
    resp = admin.client.post("/api/corpora", headers=admin.headers(), json={"name": name})
    assert resp.status_code == 422, resp.text
    assert "control character" in resp.text
    assert db.query(Corpus).count() == 0


def test_input_limits_document_name_refuses_nul(login, db, people) -> None:
    admin = login("admin")
    resp = admin.client.post(
        "/api/corpora/import",
        headers=admin.headers(),
        data={"corpus_name": "Tides", "document_name": "log\x00one"},
        files={"upload": ("t.txt", b"the tide turned .\n")},
    )
    assert resp.status_code == 422 and "control character" in resp.text


def test_input_limits_label_set_is_bounded(db, people) -> None:
    corpus, _ = make_corpus(db, ["the tide turned ."])
    too_many = [f"L{i}" for i in range(svc.MAX_INVENTORY + 1)]
    with pytest.raises(BadInput, match="at most"):
        svc.update_corpus(db, corpus, label_set=too_many, user=people.admin)
