"""The repo functions the API calls: datasets, experiments + jobs, results, tokens."""

from __future__ import annotations

import hashlib
import threading
from typing import Any

import pytest
from sqlalchemy import func, select

from app.errors import ConflictError, NotFoundError, ParameterError, ResultNotReady
from app.store import Store, comparison_rows, dataset_rows, experiment_rows, job_rows, token_rows
from app.store.models import Dataset, Experiment, Job, Token


def _dataset(store: Store, role: str, content: bytes, **description: Any) -> dict[str, Any]:
    ref = store.artifacts.put_bytes(content, media_type="application/x-netcdf")
    ds, created = dataset_rows.create_dataset(
        store,
        role=role,
        sha256=ref.sha256,
        size_bytes=ref.size_bytes,
        description={"variable": "tas", "units": "K", **description},
        artifact=ref,
        filename=f"{role}.nc",
    )
    assert created
    return ds


def _count(store: Store, model: type[Any]) -> int:
    with store.db.read() as session:
        return int(session.scalar(select(func.count()).select_from(model)) or 0)


def _trio(store: Store, tag: str = "") -> dict[str, str]:
    return {
        "realistic": _dataset(store, "hindcast", b"realistic" + tag.encode())["id"],
        "scrambled": _dataset(store, "hindcast", b"scrambled" + tag.encode())["id"],
        "observations": _dataset(store, "observations", b"obs" + tag.encode())["id"],
    }


# ----------------------------------------------------------------------------- datasets


def test_dataset_by_sha256(store: Store) -> None:
    ds = _dataset(store, "hindcast", b"bytes of a hindcast", members=10)
    assert ds["role"] == "hindcast" and ds["members"] == 10 and ds["source"] == "upload"
    assert ds["sha256"] == hashlib.sha256(b"bytes of a hindcast").hexdigest()
    assert dataset_rows.get_dataset(store, ds["id"]) == ds
    assert dataset_rows.find_dataset(store, ds["sha256"]) == ds
    assert dataset_rows.dataset_path(store, ds["id"]).read_bytes() == b"bytes of a hindcast"
    ref = store.artifacts.put_bytes(b"bytes of a hindcast")
    again, created = dataset_rows.create_dataset(
        store, role="hindcast", sha256=ref.sha256, size_bytes=ref.size_bytes,
        description={}, artifact=ref,
    )
    assert not created and again == ds
    with pytest.raises(ConflictError, match="hindcast") as info:
        dataset_rows.create_dataset(
            store, role="observations", sha256=ref.sha256, size_bytes=ref.size_bytes,
            description={}, artifact=ref,
        )
    assert info.value.http_status == 409
    assert _count(store, Dataset) == 1


def test_registered_dataset_points_at_its_path(store: Store, tmp_path: Any) -> None:
    path = tmp_path / "roots" / "obs.zarr"
    path.mkdir(parents=True)
    ds, created = dataset_rows.create_dataset(
        store, role="observations", sha256="c" * 64, size_bytes=0, description={},
        source="register", uri=str(path),
    )
    assert created and ds["uri"] == str(path) and ds["source"] == "register"
    assert dataset_rows.dataset_path(store, ds["id"]) == path


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"role": "forecast"}, "role 'forecast'"),
        ({"source": "upload"}, "artifact"),
        ({"source": "register"}, "uri"),
        ({"source": "ftp"}, "source"),
    ],
)
def test_dataset_argument_errors(store: Store, kwargs: dict[str, Any], message: str) -> None:
    args: dict[str, Any] = {"role": "hindcast", "sha256": "d" * 64, "size_bytes": 1,
                            "description": {}}
    args.update(kwargs)
    with pytest.raises(ParameterError, match=message):
        dataset_rows.create_dataset(store, **args)
    assert _count(store, Dataset) == 0


def test_unknown_ids(store: Store) -> None:
    for call in (dataset_rows.get_dataset, experiment_rows.get_experiment, job_rows.get_job, comparison_rows.get_comparison,
                 experiment_rows.result_files, job_rows.job_attempts, token_rows.revoke_token):
        with pytest.raises(NotFoundError):
            call(store, "nope_0000")


def test_same_bytes_posted_concurrently_give_one_dataset(store: Store) -> None:
    ref = store.artifacts.put_bytes(b"posted twice at once")
    results: list[tuple[dict[str, Any], bool]] = []
    errors: list[BaseException] = []
    barrier = threading.Barrier(6)

    def post() -> None:
        try:
            barrier.wait()
            results.append(
                dataset_rows.create_dataset(
                    store, role="hindcast", sha256=ref.sha256, size_bytes=ref.size_bytes,
                    description={}, artifact=ref,
                )
            )
        except BaseException as exc:  # collected for the assertion below
            errors.append(exc)

    threads = [threading.Thread(target=post) for _ in range(6)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert errors == []
    assert sum(created for _, created in results) == 1
    assert len({ds["id"] for ds, _ in results}) == 1
    assert _count(store, Dataset) == 1


# ----------------------------------------------------------------------------- experiments


def test_experiment_and_job_in_one_transaction(store: Store) -> None:
    ids = _trio(store)
    exp = experiment_rows.create_experiment(
        store, name="spring pair", options={"bootstrap": {"resamples": 50, "seed": 3}},
        parameters={"name": "spring pair", "bootstrap": {"resamples": 50}}, **ids,
    )
    assert exp["status"] == "queued" and exp["job"]["status"] == "queued"
    assert exp["variable"] == "tas"
    assert exp["datasets"] == {**ids, "land_state": None}
    assert exp["provenance"]["seed"] == 3
    assert exp["provenance"]["inputs"]["realistic"]["sha256"] == hashlib.sha256(
        b"realistic"
    ).hexdigest()
    job = job_rows.get_job(store, exp["job"]["id"])
    assert job["experiment_id"] == exp["id"] and job["kind"] == "score"
    assert job["attempts"] == 0 and job["max_attempts"] == store.settings.max_attempts
    with store.db.read() as session:
        payload = session.get(Job, exp["job"]["id"]).payload  # type: ignore[union-attr]
    assert payload["options"] == {"bootstrap": {"resamples": 50, "seed": 3}}
    assert payload["inputs"]["observations"]["path"] == str(
        dataset_rows.dataset_path(store, ids["observations"])
    )
    assert experiment_rows.get_experiment(store, exp["id"]) == exp


def test_wrong_role_or_unknown_dataset_leaves_no_rows(store: Store) -> None:
    ids = _trio(store)
    with pytest.raises(ParameterError, match="observations slot needs") as info:
        experiment_rows.create_experiment(
            store, name="bad", options={}, **{**ids, "observations": ids["scrambled"]}
        )
    assert info.value.detail["slot"] == "observations"
    with pytest.raises(NotFoundError, match="land_state"):
        experiment_rows.create_experiment(store, name="bad", options={}, land_state="ds_missing", **ids)
    with pytest.raises(ParameterError, match="name"):
        experiment_rows.create_experiment(store, name="  ", options={}, **ids)
    assert _count(store, Experiment) == 0
    assert _count(store, Job) == 0


def test_list_experiments_filters_and_pages(store: Store) -> None:
    ids = _trio(store)
    made = []
    for i in range(7):
        made.append(
            experiment_rows.create_experiment(
                store, name=f"exp{i % 3}", options={"variable": "tas" if i % 2 else "pr"},
                **ids,
            )
        )
    # mark one job done to filter by status
    with store.db.write() as session:
        session.get(Job, made[4]["job"]["id"]).status = "done"  # type: ignore[union-attr]
    page = experiment_rows.list_experiments(store, limit=3)
    assert page["total"] == 7 and page["limit"] == 3 and page["offset"] == 0
    newest_first = [e["id"] for e in reversed(made)]
    assert [e["id"] for e in page["items"]] == newest_first[:3]
    rest = experiment_rows.list_experiments(store, limit=3, offset=3)
    assert [e["id"] for e in rest["items"]] == newest_first[3:6]
    assert experiment_rows.list_experiments(store, offset=6)["items"][0]["id"] == newest_first[6]
    by_name = experiment_rows.list_experiments(store, name="exp1")
    assert sorted(e["id"] for e in by_name["items"]) == sorted(
        e["id"] for i, e in enumerate(made) if i % 3 == 1
    )
    assert experiment_rows.list_experiments(store, variable="pr")["total"] == 4
    done = experiment_rows.list_experiments(store, status="done")
    assert [e["id"] for e in done["items"]] == [made[4]["id"]]
    assert experiment_rows.list_experiments(store, status="queued", variable="tas")["total"] == 3
    for bad in ({"status": "paused"}, {"limit": 0}, {"limit": 501}, {"offset": -1}):
        with pytest.raises(ParameterError):
            experiment_rows.list_experiments(store, **bad)  # type: ignore[arg-type]


def test_results_only_after_the_job_is_done(store: Store) -> None:
    exp = experiment_rows.create_experiment(store, name="r", options={}, **_trio(store))
    with pytest.raises(ResultNotReady) as info:
        experiment_rows.result_files(store, exp["id"])
    assert info.value.http_status == 409 and info.value.detail["status"] == "queued"
    with pytest.raises(ResultNotReady):
        experiment_rows.result_digest(store, exp["id"])
    refs = {
        name: store.artifacts.put_bytes(name.encode() * 10)
        for name in ("skill.json", "maps.nc", "result.json")
    }
    with store.db.write() as session:
        digest = experiment_rows.record_score_result(
            session, experiment_id=exp["id"], files=refs, provenance={"seed": 1}
        )
        session.get(Job, exp["job"]["id"]).status = "done"  # type: ignore[union-attr]
    # the identity is the SHA-256 of the sorted "name:sha256" lines (stdlib recomputation)
    expected = hashlib.sha256(
        "\n".join(f"{n}:{refs[n].sha256}" for n in sorted(refs)).encode()
    ).hexdigest()
    assert digest == expected == experiment_rows.result_digest(store, exp["id"])
    files = experiment_rows.result_files(store, exp["id"])
    assert {n: p.read_bytes() for n, p in files.items()} == {
        n: n.encode() * 10 for n in refs
    }
    assert experiment_rows.get_experiment(store, exp["id"])["provenance"]["result"] == {"seed": 1}


def test_comparison_needs_two_finished_experiments(store: Store) -> None:
    a = experiment_rows.create_experiment(store, name="a", options={}, **_trio(store, "a"))
    b = experiment_rows.create_experiment(store, name="b", options={}, **_trio(store, "b"))
    with pytest.raises(ParameterError, match="same experiment"):
        comparison_rows.create_comparison(store, baseline=a["id"], candidate=a["id"])
    with pytest.raises(ResultNotReady):
        comparison_rows.create_comparison(store, baseline=a["id"], candidate=b["id"])
    with pytest.raises(NotFoundError):
        comparison_rows.create_comparison(store, baseline=a["id"], candidate="ex_missing")
    with store.db.write() as session:
        for e in (a, b):
            session.get(Job, e["job"]["id"]).status = "done"  # type: ignore[union-attr]
    cmp = comparison_rows.create_comparison(
        store, baseline=a["id"], candidate=b["id"], options={"bootstrap": {"resamples": 50}}
    )
    assert cmp["status"] == "queued" and cmp["result"] is None
    job = job_rows.get_job(store, cmp["job"]["id"])
    assert job["kind"] == "compare" and job["comparison_id"] == cmp["id"]


def test_job_counts(store: Store) -> None:
    assert job_rows.job_counts(store) == {"queued": 0, "running": 0, "done": 0, "failed": 0}
    ids = _trio(store)
    for i in range(3):
        experiment_rows.create_experiment(store, name=f"c{i}", options={}, **ids)
    assert job_rows.job_counts(store) == {"queued": 3, "running": 0, "done": 0, "failed": 0}


# ----------------------------------------------------------------------------- tokens


def test_tokens_are_stored_hashed(store: Store) -> None:
    token, info = token_rows.create_token(store, name="dashboard", scope="read")
    assert token.startswith("ll_") and len(token) > 40
    assert info["prefix"] == token[:11] and info["scope"] == "read"
    with store.db.read() as session:
        row = session.get(Token, info["id"])
        assert row is not None
        stored = [str(getattr(row, c.key)) for c in Token.__table__.columns]
        token_hash = row.token_hash
    assert all(token not in value for value in stored)
    assert token_hash == hashlib.sha256(token.encode()).hexdigest()
    assert all("hash" not in key for key in info)
    verified = token_rows.verify_token(store, token)
    assert verified is not None and verified["id"] == info["id"]
    for bad in (None, "", token + "x", token[:-1] + ("A" if token[-1] != "A" else "B"),
                "Bearer " + token, "ll_" + "x" * 300):
        assert token_rows.verify_token(store, bad) is None
    token_rows.revoke_token(store, info["id"])
    assert token_rows.verify_token(store, token) is None
    assert token_rows.list_tokens(store)[0]["revoked_at"] is not None


def test_scopes(store: Store) -> None:
    allowed = {
        (have, need): token_rows.scope_allows(have, need)
        for have in ("read", "write", "admin")
        for need in ("read", "write", "admin")
    }
    assert allowed == {
        ("read", "read"): True, ("read", "write"): False, ("read", "admin"): False,
        ("write", "read"): True, ("write", "write"): True, ("write", "admin"): False,
        ("admin", "read"): True, ("admin", "write"): True, ("admin", "admin"): True,
    }
    assert not token_rows.scope_allows("root", "read")
    with pytest.raises(ParameterError, match="scope"):
        token_rows.create_token(store, name="x", scope="root")
    with pytest.raises(ParameterError, match="name"):
        token_rows.create_token(store, name="", scope="read")


def test_ping(store: Store) -> None:
    assert store.db.ping() is True
