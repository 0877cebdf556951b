"""Writes to the store, each a function of an open connection inside the caller's transaction.

The claim protocol: a recording is registered by its content hash with status "claimed" before it is analysed;
its results are written, and the status set to "analysed" (or "quarantined"), in one later transaction that
first checks the claim is still this worker's. A worker killed in between leaves only a claim, which another
worker takes over once it is older than the claim timeout.
"""

from __future__ import annotations

import json
from datetime import UTC, timedelta

from sqlalchemy import and_, bindparam, func, select
from sqlalchemy.dialects import postgresql, sqlite

from . import audit as _audit
from . import summaries
from .codec import f32, f64, num, resonances_blob, text
from .errors import StoreError
from .integrity import flags_digest, model_digest, qc_digest
from .schema import (
    actuations,
    approvals,
    backgrounds,
    events,
    flags,
    lots,
    put_info,
    qc_results,
    recordings,
    reference_models,
    resonance_components,
    rigs,
    signals,
    sites,
    store_info,
    trajectories,
    units,
    utc_now,
    verdicts,
)
from .signals import refresh_signals
from .types import APPROVAL_MEANINGS, REVIEW_VERDICTS, VERDICTS, Analysed, Claim

__all__ = [
    "claim", "reopen_quarantined", "commit_analyses", "commit_quarantine", "release_claim", "insert_scores",
    "insert_model", "activate_model", "add_verdict", "audit",
]


def _insert_ignore(conn, table, values: dict) -> int | None:
    """INSERT ... ON CONFLICT DO NOTHING on SQLite and PostgreSQL alike; the new row's id, or None if the row
    was there already (RETURNING, because the drivers' rowcount for this statement differs)."""
    mod = postgresql if conn.dialect.name == "postgresql" else sqlite
    return conn.execute(mod.insert(table).values(**values).on_conflict_do_nothing().returning(table.c.id)).scalar()


# ------------------------------------------------------------------------------------------------------ claims
def claim(conn, content_hash, original_name, size_bytes, *, worker, claim_timeout_s, gone=None) -> Claim:
    """Register a recording by its content hash and claim it for ``worker`` (see Claim). ``gone``: a function of
    a claim's holder (its worker name) that is True when that worker is known to have stopped (a process on this
    host that no longer runs): its claim is taken over at once instead of after ``claim_timeout_s``."""
    now = utc_now()
    original_name = text(original_name)
    new_id = _insert_ignore(conn, recordings, dict(
        content_hash=content_hash, original_name=original_name, size_bytes=int(size_bytes), received_at=now,
        status="claimed", claimed_by=worker, claimed_at=now,
    ))
    if new_id is not None:
        return Claim("new", new_id, "claimed", original_name)
    # PostgreSQL: SELECT ... FOR UPDATE SKIP LOCKED. A row another worker's transaction holds (it is claiming,
    # renewing or committing it this instant) is passed over as busy instead of waited for; the row we get stays
    # ours until commit, so the takeover below cannot race. SQLite's BEGIN IMMEDIATE already serialises writers.
    row = conn.execute(
        select(recordings.c.id, recordings.c.status, recordings.c.claimed_at, recordings.c.claimed_by,
               recordings.c.original_name).where(recordings.c.content_hash == content_hash)
        .with_for_update(skip_locked=True)
    ).first()
    if row is None:
        return Claim("busy", None, "claimed", original_name)
    if row.status != "claimed":
        return Claim("duplicate", row.id, row.status, row.original_name)
    fresh = row.claimed_at is not None and row.claimed_at > now - timedelta(seconds=claim_timeout_s)
    if fresh and not (gone is not None and row.claimed_by != worker and gone(row.claimed_by)):
        return Claim("busy", row.id, "claimed", row.original_name)
    # Stale: take it over, but only if nobody else did since we looked (compare and set).
    taken = conn.execute(
        recordings.update()
        .where(and_(recordings.c.id == row.id, recordings.c.status == "claimed",
                    recordings.c.claimed_by == row.claimed_by, recordings.c.claimed_at == row.claimed_at))
        .values(claimed_by=worker, claimed_at=now, original_name=original_name)
    ).rowcount
    return Claim("retry" if taken == 1 else "busy", row.id, "claimed", original_name)


def reopen_quarantined(conn, recording_id, *, worker, sidecar_text) -> bool:
    """Claim a quarantined recording again when it is delivered with a sidecar other than the one it had (the
    usual fix for a quarantined file); False when the sidecar is the same (a plain duplicate) or it is not
    quarantined (any more)."""
    row = conn.execute(select(recordings.c.status, recordings.c.sidecar_json, recordings.c.error)
                       .where(recordings.c.id == recording_id)).first()
    sidecar_text = text(sidecar_text)
    if row is None or row.status != "quarantined" or row.sidecar_json == sidecar_text or sidecar_text is None:
        return False
    done = conn.execute(
        recordings.update().where(and_(recordings.c.id == recording_id, recordings.c.status == "quarantined"))
        .values(status="claimed", claimed_by=worker, claimed_at=utc_now())
    ).rowcount
    if done == 1:
        audit(conn, person=worker, action="quarantine.retry", target=f"recording {recording_id}",
              detail={"previous_reason": row.error})
    return done == 1


def _finish(conn, recording_id, worker, **values) -> bool:
    """Set the final status of a claimed recording if the claim is still ``worker``'s."""
    done = conn.execute(
        recordings.update()
        .where(and_(recordings.c.id == recording_id, recordings.c.status == "claimed",
                    recordings.c.claimed_by == worker))
        .values(claimed_by=None, claimed_at=None, analysed_at=utc_now(), **values)
    ).rowcount
    return done == 1


def refresh_claims(conn, *, worker) -> int:
    """The heartbeat: every live claim of ``worker`` is renewed (claimed_at = now); returns how many."""
    return conn.execute(recordings.update().where(and_(recordings.c.status == "claimed",
                                                       recordings.c.claimed_by == worker))
                        .values(claimed_at=utc_now())).rowcount


def release_claim(conn, recording_id, *, worker):
    conn.execute(recordings.delete().where(and_(recordings.c.id == recording_id, recordings.c.status == "claimed",
                                                recordings.c.claimed_by == worker)))


def commit_quarantine(conn, recording_id, *, worker, reason, quarantine_path, sidecar_json=None) -> bool:
    """Mark a claimed recording as quarantined with its reason and where its copy is kept (None: not kept)."""
    return _finish(conn, recording_id, worker, status="quarantined", error=text(reason),
                   archive_path=text(quarantine_path), sidecar_json=text(sidecar_json))


# ------------------------------------------------------------------------------------------------- identifiers
def _get_id(conn, cache, table, **key) -> int:
    ck = (table.name, tuple(sorted(key.items())))
    hit = cache.get(ck)
    if hit is not None:
        return hit
    cond = and_(*[table.c[k] == v for k, v in key.items()])
    row = conn.execute(select(table.c.id).where(cond)).first()
    if row is None:
        _insert_ignore(conn, table, key)
        row = conn.execute(select(table.c.id).where(cond)).one()
    cache[ck] = row.id
    return row.id


# ----------------------------------------------------------------------------------------------------- results
def _utc_naive(dt):
    if dt.tzinfo is None:
        return dt
    return dt.astimezone(UTC).replace(tzinfo=None)


def commit_analyses(conn, cache, items: list[Analysed], *, worker) -> list[int | None]:
    """Write analysed recordings (QC, actuation, events with band levels, scores, flags), each whole.

    Rows of all items go in with one executemany per table. Returns the actuation id per item, or None for an
    item whose claim is no longer ``worker``'s (nothing of it is written).
    """
    for it in items:
        if it.result.sidecar is None:
            raise StoreError(f"{it.result.path}: a recording needs its sidecar (site, rig, lot, unit) to be stored")
    ids = [it.recording_id for it in items]
    mine = set(conn.execute(
        select(recordings.c.id)
        .where(and_(recordings.c.id.in_(ids), recordings.c.status == "claimed", recordings.c.claimed_by == worker))
        .with_for_update()  # PostgreSQL: hold the rows until commit; SQLite: BEGIN IMMEDIATE already does
    ).scalars())
    keep = [it for it in items if it.recording_id in mine]
    if not keep:
        return [None] * len(items)
    now = utc_now()
    conn.execute(
        recordings.update().where(and_(recordings.c.id == bindparam("b_id"), recordings.c.claimed_by == worker)),
        [dict(b_id=it.recording_id, status="analysed", error=None, archive_path=text(it.archive_path),
              sample_rate_hz=int(it.result.sample_rate_hz), channels=int(it.result.n_channels),
              duration_s=num(it.result.duration_s), profile=it.result.profile,
              sidecar_json=text(json.dumps(it.result.sidecar.to_json(), ensure_ascii=False)),
              claimed_by=None, claimed_at=None, analysed_at=now) for it in keep],
    )
    qc_of, qc_flags_of = {}, {}
    for it in keep:  # each recording's QC result set, and its checksum, before anything is written
        qc_of[it.recording_id] = [
            dict(recording_id=it.recording_id, check_name=q.check, value=num(q.value), limit_value=num(q.limit),
                 passed=bool(q.passed), detail=text(q.detail)) for q in it.result.qc]
        qc_flags_of[it.recording_id] = [
            dict(model_id=None, event=None, statistic=f"qc:{q.check}", value=num(q.value), limit_value=num(q.limit),
                 reason=text(f"recording failed its {q.check} check: {q.detail}"), created_at=now)
            for q in it.result.qc if not q.passed]
    act_rows = []
    for it in keep:
        sc, res = it.result.sidecar, it.result
        site_id = _get_id(conn, cache, sites, name=sc.site)
        rig_id = _get_id(conn, cache, rigs, site_id=site_id, name=sc.rig)
        lot_id = _get_id(conn, cache, lots, name=sc.lot)
        unit_id = _get_id(conn, cache, units, lot_id=lot_id, name=sc.unit)
        act_rows.append(dict(
            recording_id=it.recording_id, profile=res.profile, site_id=site_id, rig_id=rig_id, lot_id=lot_id,
            unit_id=unit_id, actuation=int(sc.actuation), recorded_at=_utc_naive(sc.recorded_at),
            recorded_at_text=sc.recorded_at.isoformat(), passed_qc=bool(res.passed_qc),
            marker_source=res.marker_source, profile_version=getattr(res, "profile_version", None),
            profile_sha256=getattr(res, "profile_sha256", None) or None,
            qc_sha256=qc_digest(it.recording_id, bool(res.passed_qc), qc_of[it.recording_id],
                                qc_flags_of[it.recording_id]),
        ))
    act_ids = list(conn.execute(
        actuations.insert().returning(actuations.c.id, sort_by_parameter_order=True), act_rows).scalars())
    qc_rows, ev_rows, flag_rows, bg_rows = [], [], [], []
    by_model: dict = {}
    for it, actuation_id in zip(keep, act_ids):
        res = it.result
        qc_rows += qc_of[it.recording_id]
        flag_rows += [dict(f, actuation_id=actuation_id) for f in qc_flags_of[it.recording_id]]
        for ev in res.events:
            ev_rows.append(_event_row(actuation_id, ev, res.features.get(ev.name)))
        bg = getattr(res, "background", None)
        if bg is not None:
            bg_rows.append(dict(actuation_id=actuation_id, start_s=num(bg.start_s), duration_s=num(bg.duration_s),
                                level_dbfs=num(bg.level_dbfs), n_bands=int(bg.levels_db.size),
                                levels_f32=f32(bg.levels_db), band_centres_f64=f64(bg.band_centres_hz)))
        for event, (model_id, scored) in it.scored.items():
            by_model.setdefault((model_id, event), []).append((actuation_id, scored))
    conn.execute(qc_results.insert(), qc_rows)
    if ev_rows:
        conn.execute(events.insert(), ev_rows)
    if flag_rows:
        conn.execute(flags.insert(), flag_rows)
    if bg_rows:
        conn.execute(backgrounds.insert(), bg_rows)
    for (model_id, event), scored in by_model.items():
        insert_scores(conn, model_id, event, scored)
    # The per-day summaries the views read, recomputed for the cells this batch touched, in its transaction.
    summaries.refresh_for(conn, act_ids)
    # The decisions at every level move with each batch, in the same transaction as the actuations behind them.
    for profile in sorted({it.result.profile for it in keep}):
        refresh_signals(conn, profile)
    got = dict(zip((it.recording_id for it in keep), act_ids))
    return [got.get(it.recording_id) for it in items]


def _event_row(actuation_id, ev, f) -> dict:
    row = dict(
        actuation_id=actuation_id, name=ev.name, found=bool(ev.found), onset_s=num(ev.onset_s),
        end_s=num(ev.end_s), duration_s=num(ev.duration_s), peak_dbfs=num(ev.peak_dbfs),
        latency_s=num(ev.latency_s), method=ev.method, reason=text(ev.reason) or None,
        dominant_hz=None, centroid_hz=None, band_energy_db=None, padded_slices=None, level_reference=None,
        n_slices=None, n_bands=None, levels_f32=None, slice_times_f64=None, band_centres_f64=None,
        resonances_f64=None,
    )
    if f is not None:
        row.update(
            dominant_hz=num(f.dominant_hz), centroid_hz=num(f.centroid_hz), band_energy_db=num(f.band_energy_db),
            padded_slices=int(f.padded_slices), level_reference=f.reference, n_slices=int(f.levels_db.shape[0]),
            n_bands=int(f.levels_db.shape[1]), levels_f32=f32(f.levels_db), slice_times_f64=f64(f.slice_times_s),
            band_centres_f64=f64(f.band_centres_hz), resonances_f64=resonances_blob(f.resonances),
        )
    return row


def insert_scores(conn, model_id, event, items) -> None:
    """Write scores of one event under one model: items [(actuation_id, ScoredEvent)] (analysis.store.codec)."""
    now = utc_now()
    traj, fl, comps = [], [], []
    for actuation_id, scored in items:
        comps.extend(dict(actuation_id=actuation_id, model_id=model_id, k=k, value=v)
                     for k, v in enumerate(scored.resonance_components) if num(v) is not None)
        row = dict(scored.trajectory, actuation_id=actuation_id, event=event, model_id=model_id)
        rows = [dict(f, reason=text(f["reason"]), actuation_id=actuation_id, event=event, model_id=model_id,
                     created_at=now) for f in scored.flags]
        row["flags_sha256"] = flags_digest(row, rows)
        traj.append(row)
        fl.extend(rows)
    if traj:
        conn.execute(trajectories.insert(), traj)
    if fl:
        conn.execute(flags.insert(), fl)
    if comps:
        conn.execute(resonance_components.insert(), comps)


# ------------------------------------------------------------------------------------------------------ models
def insert_model(conn, *, profile, event, model_json: str, model_npz: bytes, meta: dict, model, created_by,
                 activate: bool = True) -> tuple[int, int]:
    """Store a fitted model as the next version of (profile, event); returns (model_id, version)."""
    version = (conn.execute(select(func.max(reference_models.c.version)).where(
        and_(reference_models.c.profile == profile, reference_models.c.event == event))).scalar() or 0) + 1
    now = utc_now()
    if activate:
        _retire_active(conn, profile, event)
    row = dict(
        profile=profile, event=event, version=version, reference_lots=json.dumps(list(meta.get("reference_lots", []))),
        parameters=json.dumps(model.get_params()), n_recordings=int(meta.get("n_recordings", 0)),
        n_components=int(model.n_components_), t2_limit=num(model.t2_limit_), spe_limit=num(model.spe_limit_),
        created_by=text(created_by), created_at=now, model_json=model_json, model_npz=bytes(model_npz),
        profile_version=meta.get("profile_version"), profile_sha256=meta.get("profile_sha256") or None,
    )
    model_id = conn.execute(reference_models.insert().values(
        status="active" if activate else "pending", content_sha256=model_digest(row), **row,
    ).returning(reference_models.c.id)).scalar_one()
    if activate:
        summaries.refresh_counts(conn, profile)  # the retired version's flags no longer count
    audit(conn, person=created_by, action="reference.build", target=f"model {model_id}",
          detail={"profile": profile, "event": event, "version": version, "active": activate,
                  "reference_lots": list(meta.get("reference_lots", [])), "n_recordings": meta.get("n_recordings"),
                  "n_components": int(model.n_components_)})
    return model_id, version


def _retire_active(conn, profile, event) -> None:
    m = reference_models
    conn.execute(m.update().where(and_(m.c.profile == profile, m.c.event == event, m.c.status == "active"))
                 .values(status="retired"))


def _make_active(conn, model_id: int, profile, event) -> None:
    """Make a stored version the one active version of its profile and event (the old one retired)."""
    _retire_active(conn, profile, event)
    conn.execute(reference_models.update().where(reference_models.c.id == model_id).values(status="active"))
    summaries.refresh_counts(conn, profile)  # which flags count has changed


def activate_model(conn, model_id, *, person, where):
    row = conn.execute(select(reference_models.c.profile, reference_models.c.event, reference_models.c.version)
                       .where(reference_models.c.id == model_id)).first()
    if row is None:
        raise StoreError(f"{where}: no reference model with id {model_id}")
    _make_active(conn, model_id, row.profile, row.event)
    audit(conn, person=person, action="reference.activate", target=f"model {model_id}",
          detail={"profile": row.profile, "event": row.event, "version": row.version})


#: store_info key of the site's rule that the approver must not be the person who built the version.
POLICY_OTHER_APPROVER = "policy.approver_not_builder"


def approve_model(conn, model_id, *, user, meaning, reason, where) -> int:
    """A signed approval of a pending model version by ``user`` (a store User whose password the caller has just
    checked): recorded, the version made active, the signals refreshed, all in this transaction and audited."""
    from .users import role_at_least

    m = reference_models
    row = conn.execute(select(m.c.profile, m.c.event, m.c.version, m.c.status, m.c.created_by)
                       .where(m.c.id == int(model_id))).first()
    if row is None:
        raise StoreError(f"{where}: no reference model with id {model_id}")
    if row.status != "pending":
        raise StoreError(f"{where}: model {model_id} ({row.profile}/{row.event} version {row.version}) is "
                         f"{row.status}, not awaiting approval")
    if not (user.active and role_at_least(user.role, "method_owner")):
        raise StoreError(f"approving a reference model needs an active method owner; {user.user_name} is "
                         f"{user.role} ({user.state})")
    if meaning not in APPROVAL_MEANINGS:
        raise StoreError(f"the signature's meaning is one of {', '.join(map(repr, APPROVAL_MEANINGS))}; got "
                         f"{meaning!r}")
    reason = text(str(reason or "").strip())[:2000]
    if not reason:
        raise StoreError("an approval needs a reason")
    rule = conn.execute(select(store_info.c.value).where(store_info.c.key == POLICY_OTHER_APPROVER)).scalar()
    if rule == "true" and row.created_by == user.user_name:
        raise StoreError(f"this site requires that the approver is not the person who built the version; "
                         f"{user.user_name} built model {model_id}")
    aid = conn.execute(approvals.insert().values(model_id=int(model_id), person=user.user_name, at=utc_now(),
                                                 meaning=meaning, reason=reason).returning(approvals.c.id)).scalar_one()
    _make_active(conn, int(model_id), row.profile, row.event)
    audit(conn, person=user.user_name, action="reference.approve", target=f"model {model_id}",
          detail={"profile": row.profile, "event": row.event, "version": row.version, "meaning": meaning,
                  "reason": reason, "built_by": row.created_by, "approval_id": aid})
    refresh_signals(conn, row.profile)
    return aid


def set_policy(conn, key: str, value: str, *, person) -> None:
    old = put_info(conn, key, value)
    audit(conn, person=person, action="policy.set", target=key, detail={"from": old, "to": value})


# ---------------------------------------------------------------------------------------------------- verdicts
def add_verdict(conn, flag_id, *, person, verdict, note, where) -> int:
    if verdict not in VERDICTS:
        raise StoreError(f"verdict must be one of {', '.join(map(repr, VERDICTS))}; got {verdict!r}")
    if not str(person).strip():
        raise StoreError("a verdict needs the name of the person who gives it; got an empty name")
    if conn.execute(select(flags.c.id).where(flags.c.id == flag_id)).first() is None:
        raise StoreError(f"{where}: no flag with id {flag_id}")
    vid = conn.execute(verdicts.insert().values(
        flag_id=flag_id, person=text(person), verdict=verdict, note=text(note) or None, created_at=utc_now(),
    ).returning(verdicts.c.id)).scalar_one()
    audit(conn, person=person, action="verdict.add", target=f"flag {flag_id}",
          detail={"verdict": verdict, "note": note or ""})
    return vid


def add_review(conn, signal_id, *, person, verdict, comment, where) -> int:
    """A person's verdict on a signal (REVIEW_VERDICTS; a later one supersedes it, both kept), audited."""
    if verdict not in REVIEW_VERDICTS:
        raise StoreError(f"a review verdict is one of {', '.join(map(repr, REVIEW_VERDICTS))}; got {verdict!r}")
    if not str(person).strip():
        raise StoreError("a verdict needs the signed-in person who gives it; got an empty name")
    comment = text(str(comment or "").strip())[:2000]
    if verdict == "no fault found" and not comment:
        raise StoreError("'no fault found' needs a comment: what was looked at, and why it is no fault")
    sig = conn.execute(select(signals.c.id, signals.c.level, signals.c.lot, signals.c.rig, signals.c.unit,
                              signals.c.actuation_id).where(signals.c.id == int(signal_id))).first()
    if sig is None:
        raise StoreError(f"{where}: no signal with id {signal_id}")
    vid = conn.execute(verdicts.insert().values(
        signal_id=int(signal_id), flag_id=None, person=text(person), verdict=verdict, note=comment or None,
        created_at=utc_now()).returning(verdicts.c.id)).scalar_one()
    audit(conn, person=person, action="review.add", target=f"signal {signal_id}",
          detail={"verdict": verdict, "comment": comment, "level": sig.level, "lot": sig.lot, "rig": sig.rig,
                  "unit": sig.unit, "actuation_id": sig.actuation_id, "verdict_id": vid})
    return vid


def audit(conn, *, person, action, target="", detail=None):
    """One row of the hash-chained audit trail, in the caller's transaction (analysis.store.audit)."""
    _audit.append(conn, person=person, action=action, target=target, detail=detail)
