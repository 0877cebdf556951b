"""The hash-chained audit trail (analysis.store.audit) and `harken audit`: every kind of tampering by someone
with the database (the append-only trigger dropped first, as they would) is found."""

from __future__ import annotations

import csv
import threading

import pytest

from analysis.store import Store
from analysis.store import audit as chain
from tests.analysis.conftest import run_cli

FIELDS = ("at", "person", "action", "target", "detail", "prev_sha256", "row_sha256")
DROP = {"sqlite": ["DROP TRIGGER IF EXISTS audit_log_no_update", "DROP TRIGGER IF EXISTS audit_log_no_delete"],
        "postgresql": ["DROP TRIGGER IF EXISTS audit_log_append_only ON audit_log"]}


def _trail(store_url, tmp_path, n=6) -> Store:
    store = Store.open(store_url, files_dir=tmp_path)
    for i in range(n):
        store.audit(person=f"person{i % 2}", action="test.step", target=f"thing {i}", detail={"i": i, "é": "ü"})
    return store


def _attack(store, *sql):
    with store.engine.begin() as conn:
        for ddl in DROP[store.dialect]:
            conn.exec_driver_sql(ddl)
        for s in sql:
            conn.exec_driver_sql(s)


def _verify(store, head=None):
    with store.read() as conn:
        return chain.verify(conn, expected_head=head)


def test_an_untouched_trail_verifies_and_exports(store_url, tmp_path):
    with _trail(store_url, tmp_path) as store:
        assert _verify(store) == (6, None)
        with store.read() as conn:
            head = chain.head(conn)
            rows = conn.exec_driver_sql("SELECT id, prev_sha256, row_sha256 FROM audit_log ORDER BY id").all()
        # each row points at the one before; the first at the genesis value; the head is the last
        assert [r[1] for r in rows] == [chain.GENESIS] + [r[2] for r in rows[:-1]]
        assert head == (rows[-1][0], rows[-1][2])
        code, out, _ = run_cli("audit", "verify", "--store", store_url, "--head", f"{head[0]}:{head[1]}")
        assert code == 0 and "unbroken chain" in out
        out_csv = tmp_path / "audit.csv"
        assert run_cli("audit", "export", "--store", store_url, "--out", str(out_csv))[0] == 0
        got = list(csv.DictReader(out_csv.open(encoding="utf-8")))
        assert [r["target"] for r in got] == [f"thing {i}" for i in range(6)] and "ü" in got[0]["detail"]


@pytest.mark.parametrize("field", FIELDS)
def test_altering_any_field_of_any_row_is_found(store_url, tmp_path, field):
    value = {"at": "2020-01-01 00:00:00", "detail": '{"i": 99}'}.get(field, "x" * 64 if "sha" in field else "eve")
    for row_id in (1, 4, 6):
        with _trail(store_url, tmp_path, n=6) as store:
            _attack(store, f"UPDATE audit_log SET {field} = '{value}' WHERE id = {row_id}")
            n, problem = _verify(store)
            assert problem is not None, (field, row_id)
            # the altered row itself, or (for its own hash) the row after it, is named
            assert f"row {row_id}" in problem or f"row {row_id + 1}" in problem, problem
        _reset(store_url, tmp_path)


def _reset(store_url, tmp_path):
    """A fresh store at the same URL for the next round."""
    if store_url.startswith("sqlite"):
        for p in tmp_path.glob("harken.db*"):
            p.unlink()
    else:
        from sqlalchemy import create_engine
        engine = create_engine(store_url)
        with engine.begin() as conn:
            conn.exec_driver_sql("DROP SCHEMA public CASCADE")
            conn.exec_driver_sql("CREATE SCHEMA public")
        engine.dispose()


def test_deleting_a_row_in_the_middle_is_found(store_url, tmp_path):
    with _trail(store_url, tmp_path) as store:
        _attack(store, "DELETE FROM audit_log WHERE id = 3")
        _, problem = _verify(store)
        assert problem is not None and "audit row 4 does not follow row 2" in problem


def test_truncating_the_tail_is_found_against_the_recorded_head(store_url, tmp_path):
    with _trail(store_url, tmp_path) as store:
        with store.read() as conn:
            recorded = chain.head(conn)
        _attack(store, "DELETE FROM audit_log WHERE id > 4")
        _, problem = _verify(store)
        assert problem is not None and "ends at row 4" in problem and "recorded at row 6" in problem
        # the attacker rewrites the store's own head too: a head recorded elsewhere still finds it
        _attack(store, "UPDATE store_info SET value = (SELECT id || ':' || row_sha256 FROM audit_log WHERE id = 4) "
                       "WHERE key = 'audit_head'")
        assert _verify(store)[1] is None
        _, problem = _verify(store, head=recorded)
        assert problem is not None and "ends at row 4" in problem
        code, out, _ = run_cli("audit", "verify", "--store", store_url, "--head", f"{recorded[0]}:{recorded[1]}")
        assert code == 1 and "rows after 4 were removed" in out


def test_concurrent_writers_keep_one_chain(store_url, tmp_path):
    with _trail(store_url, tmp_path, n=1) as store:
        def work(k):
            with Store.open(store_url, files_dir=tmp_path) as s:
                for i in range(15):
                    s.audit(person=f"w{k}", action="test.concurrent", target=str(i))

        threads = [threading.Thread(target=work, args=(k,)) for k in range(4)]
        for t in threads:
            t.start()
        for t in threads:
            t.join()
        assert _verify(store) == (61, None)


def test_a_bad_head_argument_is_refused(store_url, tmp_path):
    with _trail(store_url, tmp_path, n=1):
        code, _, err = run_cli("audit", "verify", "--store", store_url, "--head", "12:abc")
    assert code == 1 and "--head: a head is ID:SHA256" in err


def test_the_trail_is_filtered_in_the_database(sqlite_url, tmp_path):
    from analysis.store import queries

    with _trail(sqlite_url, tmp_path) as store:
        store.audit(person="person0", action="auth.signin")
        with store.read() as conn:
            mine = queries.audit_log(conn, person="person0")
            auth_rows = queries.audit_log(conn, action_prefix="auth.")
            newest = queries.audit_log(conn, newest_first=True, limit=2)
            day = str(mine["at"].iloc[0])[:10]
            that_day = queries.audit_log(conn, since=day, until=day)  # a date as until: the whole day
            people, kinds = queries.audit_facets(conn)
    assert list(mine["id"]) == [1, 3, 5, 7] and set(mine["person"]) == {"person0"}
    assert list(auth_rows["action"]) == ["auth.signin"]
    assert list(newest["id"]) == [7, 6]
    assert len(that_day) == 7
    assert people == ["person0", "person1"] and kinds == ["auth.", "test."]
