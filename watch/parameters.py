"""Parameter versions of the sections: which strengths, weights and water lines an assessment
used, and where they came from.

Every section has a history of parameter versions in the store's ``section_versions`` table
(the section as ``solver.section.section_to_dict`` JSON, a checksum, a provenance line and the
time it was recorded, by the caller's clock) and the digest of the section file it rests on.
The newest version is the one in force. Versions follow the section file listed in site.toml
(:func:`follow_section_file`, run by every cycle): the first use records it as version 1, and
every change of the file's content becomes a new version with provenance "section file <path>
(sha256 <digest>, seen <time>)"; a missing or invalid file keeps the last valid version in
force. A back-analysis (:func:`calibrate`) adds a version whose provenance names the case, the
failure date and who ran it; it stays in force until the section file is edited, when the file
wins. Earlier assessments keep the version id they recorded, so their inputs can always be
recovered.

A calibration is refused unless it passes its checks: the back-analysis result must pass its
own consistency checks (:func:`solver.backcalc.consistency_checks`), and every calibrated
section that is not a section of the slip must stand, with the new strength, through the worst
times of its own stored record (:func:`check_record`). An engineer may override a refusal with
a reason, which is stored with the calibration and shown wherever calibrations are listed.
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import asdict, dataclass
from datetime import datetime, timedelta

from solver.errors import SectionError, SolverError
from solver.backcalc import with_strength
from solver.section import Section, section_from_dict, section_to_dict
from watch.analysis import analyse
from watch.config import SiteConfig
from watch.errors import CalibrationRefused, ConfigError, StoreError
from watch.sections import read_section_file
from watch.store import Store, parse_utc_text, utc_text
from watch.waterlines import section_with_stored_lines, stored_water_lines
from watch.workspace import Workspace

__all__ = [
    "SectionVersion",
    "Calibration",
    "SectionFileCheck",
    "follow_section_file",
    "RecordCheck",
    "RECORD_CHECK_TIMES",
    "RECORD_CHECK_SPACING",
    "check_record",
    "current_section",
    "section_version",
    "section_history",
    "calibrate",
]


@dataclass(frozen=True)
class SectionVersion:
    """One stored parameter version of a section.

    ``id`` is the row id that ``assessments.section_version_id`` refers to; ``version`` counts
    1, 2, ... per section.
    """

    id: int
    section_id: str
    version: int
    provenance: str
    created_utc: str
    checksum: str

    @classmethod
    def from_row(cls, row: dict) -> SectionVersion:
        return cls(
            id=row["id"], section_id=row["section_id"], version=row["version"],
            provenance=row["provenance"], created_utc=row["created_utc"],
            checksum=row["checksum"],
        )  # fmt: skip


@dataclass(frozen=True)
class SectionFileCheck:
    """What :func:`follow_section_file` found.

    ``version_id``: row id of the version in force afterwards (None: no valid version at all);
    ``new_version``: the version number recorded from the file by this check, or None;
    ``problem``: what is wrong with the file (missing, unreadable, invalid, another id),
    naming the file, or None; ``file``: the file as site.toml lists it.
    """

    section_id: str
    file: str
    version_id: int | None
    new_version: int | None = None
    problem: str | None = None


def follow_section_file(workspace: Workspace, store: Store, section_id: str, now: datetime, *,
                        config: SiteConfig | None = None) -> SectionFileCheck:  # fmt: skip
    """Make the parameter version in force follow the section file (writing store; inside or
    outside an open transaction).

    The file that site.toml lists for the section is read and the SHA-256 digest of its bytes
    compared with the digest the newest version rests on. When they differ, the file's section
    becomes a new version, with provenance "section file <path> (sha256 <digest>, seen <now>)"
    and ``created_utc`` = ``now`` (the cycle's clock). Any change of the file's bytes counts.

    What wins after a calibration: the file, when it is edited later. A calibrated version
    (:func:`calibrate`) rests on the digest of the file version it was calibrated from, so it
    stays in force while the file is unchanged; once the file is edited, the edited file is
    the version in force and the back-calculated strength is not carried over (the new
    version's provenance names the calibrated version it replaces). Calibrate again to apply
    the back-analysis to the edited file.

    A missing, unreadable or invalid file, or one whose [section] id differs, changes nothing:
    the newest valid version stays in force and ``problem`` says what is wrong. Raises
    ConfigError only when site.toml does not list the section.
    """
    if config is None:
        config = workspace.config()
    ref = config.section(section_id)
    latest = store.latest_section_version(section_id)
    path = workspace.root / ref.file
    try:
        section, digest = read_section_file(path)
        if section.id != section_id:
            raise ConfigError(f"{path}: [section] id = {section.id!r}, but site.toml lists this file "
                              f"for section {section_id!r}; make them agree")  # fmt: skip
    except ConfigError as error:
        kept = ("no valid version is stored yet" if latest is None else
                f"version {latest['version']} ({latest['provenance']}) stays in force")
        return SectionFileCheck(section_id, ref.file, None if latest is None else latest["id"],
                                problem=f"{error}; {kept}")  # fmt: skip
    if latest is not None and latest["file_sha256"] == digest:
        return SectionFileCheck(section_id, ref.file, latest["id"])

    def record() -> SectionFileCheck:
        if latest is not None and latest["file_sha256"] is None and _rests_on_file(store, latest, section):
            # Stored before versions recorded their file's digest (migration 8): the version in
            # force is taken to rest on the file as it is now.
            store.set_version_file_digest(latest["id"], digest)
            return SectionFileCheck(section_id, ref.file, latest["id"])
        # A section added to site.toml after the last sync has no row yet to refer to.
        if store.conn.execute("SELECT 1 FROM sections WHERE id = ?", (section_id,)).fetchone() is None:
            store.sync_site(config, utc_text(now))
        provenance = f"section file {ref.file} (sha256 {digest[:12]}, seen {utc_text(now)})"
        if latest is not None and _calibrated(store, latest):
            provenance += (f"; edited after calibrated version {latest['version']}, whose "
                           "back-calculated strength is not carried over")  # fmt: skip
        version = store.record_section_version(section_id, section_to_dict(section), provenance,
                                               utc_text(now), file_sha256=digest)  # fmt: skip
        return SectionFileCheck(section_id, ref.file, store.latest_section_version(section_id)["id"], version)

    if store.conn.in_transaction:
        return record()
    with store.atomic():
        return record()


def _rests_on_file(store: Store, row: dict, section: Section) -> bool:
    """Whether a version stored without a file digest is the file's section or calibrated."""
    text = json.dumps(section_to_dict(section), sort_keys=True, default=str)
    return row["checksum"] == hashlib.sha256(text.encode()).hexdigest() or _calibrated(store, row)


def _calibrated(store: Store, row: dict) -> bool:
    return any(c["section_version_id"] == row["id"] for c in store.calibration_rows(row["section_id"]))


def current_section(
    workspace: Workspace, store: Store, section_id: str, now: datetime | None = None, *,
    config: SiteConfig | None = None,
) -> tuple[Section, int | None]:
    """The section with its parameter version in force, and that version's row id.

    The newest stored version of ``section_id`` (the cycle makes it follow the section file
    first: :func:`follow_section_file`); when none is stored yet, the section file that
    site.toml lists for it, which is then recorded as version 1 (at ``now``, required then).
    Works inside or outside an open transaction of ``store``. A read-only store cannot record
    the first version: the section file is returned with version id None, and the caller must
    not claim a version. ``config`` is site.toml as already loaded by a caller that handles
    many sections; None reads it here.

    Raises ConfigError when site.toml does not list the section, its file is invalid, or the
    file's [section] id differs from ``section_id``; StoreError for a stored version that no
    longer reads as a section.
    """
    row = store.latest_section_version(section_id)
    if row is not None:
        return _section_of(row), row["id"]
    if config is None:
        config = workspace.config()
    ref = config.section(section_id)
    if store.read_only:
        section, _ = read_section_file(workspace.root / ref.file)
        if section.id != section_id:
            raise ConfigError(f"{workspace.root / ref.file}: [section] id = {section.id!r}, but site.toml "
                              f"lists this file for section {section_id!r}; make them agree")  # fmt: skip
        return section, None
    if now is None:
        raise StoreError(f"section {section_id} has no stored version yet, and no time was given to "
                         "record its file as version 1")  # fmt: skip
    check = follow_section_file(workspace, store, section_id, now, config=config)
    if check.problem is not None:
        raise ConfigError(check.problem)
    row = store.section_version_row(check.version_id)
    return _section_of(row), row["id"]


def section_version(store: Store, version_id: int) -> tuple[Section, SectionVersion]:
    """The section exactly as stored under a version row id (e.g. an assessment's
    ``section_version_id``), with that version's record."""
    row = store.section_version_row(version_id)
    if row is None:
        raise StoreError(f"no section parameter version with id {version_id} in {store.path}")
    return _section_of(row), SectionVersion.from_row(row)


def section_history(store: Store, section_id: str) -> list[SectionVersion]:
    """Every stored parameter version of a section, oldest first."""
    return [SectionVersion.from_row(r) for r in store.section_version_rows(section_id)]


def _section_of(row: dict) -> Section:
    try:
        return section_from_dict(json.loads(row["parameters_json"]))
    except (SectionError, json.JSONDecodeError) as error:
        raise StoreError(
            f"stored parameter version {row['version']} of section {row['section_id']!r} "
            f"(id {row['id']}) does not read as a section: {error}"
        ) from None


# --------------------------------------------------------------------------------------------
# Calibration from a back-analysis


@dataclass(frozen=True)
class Calibration:
    """A parameter version made from a back-analysis, for one section.

    ``checks`` are the checks it passed or failed (the back-analysis' consistency checks and
    the section's record checks, as plain dicts with ``name``, ``passed`` and ``detail``);
    ``override_reason`` is the engineer's reason for storing it although a check failed
    (None when every check passed).
    """

    section_id: str
    material: str
    version: int
    version_id: int
    previous_version_id: int | None
    before: dict  # the material's strength before [kPa, deg]
    after: dict  # and after
    provenance: str
    calibration_id: int
    checks: tuple[dict, ...] = ()
    override_reason: str | None = None


#: Times of a calibrated section's stored record at which it must stand with the new
#: strength: the stored assessments with the lowest FoS (the wettest times it stood through).
#: With only one material's strength changed the order of the water states by FoS rarely
#: changes, and taking several guards against a reordering. Our choice, not a published value.
RECORD_CHECK_TIMES = 3
#: Record-check times lie at least this far apart, so that they are different storms rather
#: than hours of one (our choice).
RECORD_CHECK_SPACING = timedelta(days=1)


@dataclass(frozen=True)
class RecordCheck:
    """A calibrated section at one time of its stored record, with the new strength.

    Attributes
    ----------
    section_id : str
    time_utc : str or None
        The stored assessment's time (None: no stored record to check).
    stored_fos : float or None
        [-] The FoS stored then (with the strength of the time).
    fos : float or None
        [-] The FoS of the critical surface searched with the new strength and the water
        lines stored then (the search of the watch cycle, :func:`watch.analysis.analyse`).
    method : str
    passed : bool
        The section stands then (fos >= 1).
    detail : str
        The check in words.
    """

    section_id: str
    time_utc: str | None
    stored_fos: float | None
    fos: float | None
    method: str
    passed: bool
    detail: str


def check_record(
    workspace: Workspace,
    store: Store,
    section_id: str,
    material: str,
    strength: dict,
    now: datetime,
    *,
    times: int = RECORD_CHECK_TIMES,
    spacing: timedelta = RECORD_CHECK_SPACING,
) -> list[RecordCheck]:
    """Whether a section stands through its own record with a new strength of ``material``.

    The section stood at every stored time (it is not a section of the slip), so with a
    strength that is right F >= 1 then. At the ``times`` stored assessments with the lowest
    FoS (status ok: converged, from live readings), at least ``spacing`` apart and at or before
    ``now``, the section in force gets the new strength and the water lines stored with that
    assessment, and its critical surface is searched as the watch cycle searches it
    (:func:`watch.analysis.analyse`).

    Parameters
    ----------
    workspace : Workspace
    store : Store
    section_id : str
    material : str
    strength : dict
        Keyword arguments of :func:`solver.backcalc.with_strength` ([kPa], [deg]).
    now : datetime
    times : int
    spacing : timedelta

    Returns
    -------
    list of RecordCheck
        One per time checked; a single failed check with time None when the section has no
        stored assessment to check against.
    """
    section, _ = current_section(workspace, store, section_id, now=now)
    chosen: list[dict] = []
    for row in store.assessments_by_fos(section_id, utc_text(now)):
        moment = parse_utc_text(row["time_utc"])
        if all(abs(moment - parse_utc_text(c["time_utc"])) >= spacing for c in chosen):
            chosen.append(row)
        if len(chosen) == times:
            break
    if not chosen:
        return [RecordCheck(section_id, None, None, None, "", False,
                            "no stored assessment to check the new strength against: run the "
                            "watch cycle over its record first")]
    checks = []
    for row in chosen:
        lines = stored_water_lines(store, assessment_id=row["id"])
        try:
            trial = with_strength(section_with_stored_lines(section, lines), material, **strength)
            result = analyse(trial)
        except (SolverError, SectionError) as error:
            checks.append(RecordCheck(section_id, row["time_utc"], row["fos"], None, "", False,
                                      f"at {row['time_utc']} the new strength gives no FoS: "
                                      f"{error}"))
            continue
        fos = float(result.fos)
        passed = bool(math.isfinite(fos) and fos >= 1.0)
        checks.append(RecordCheck(
            section_id, row["time_utc"], row["fos"], fos, result.method, passed,
            f"at {row['time_utc']} (stored FoS {row['fos']:.3f}) the new strength gives FoS "
            f"{fos:.3f} ({result.method})" + ("" if passed else
                                               ": it would have failed, but it stood"),
        ))  # fmt: skip
    return checks


def calibrate(
    workspace: Workspace,
    store: Store,
    case_result,
    sections,
    who: str,
    now: datetime,
    *,
    override: str | None = None,
) -> list[Calibration]:
    """Store the back-calculated strength as a new parameter version of each chosen section.

    Refused (:class:`watch.errors.CalibrationRefused`, nothing stored) when the result fails
    its own consistency checks (``consistency`` of the result; a result without them is
    refused too), or when a calibrated section that is not a section of the slip would fail,
    with the new strength, at a time of its own record (:func:`check_record`); unless
    ``override`` gives the engineer's reason, which is then stored with each calibration
    (``calibrations.override_reason``) and in the provenance. Sections of the slip are checked
    against the case's stood times by the back-analysis itself.

    Parameters
    ----------
    workspace : Workspace
    store : Store
        Open for writing; all sections are calibrated in one transaction (all or none).
    case_result : watch.backcalc.CaseResult or dict
        A back-analysis run, or its JSON (``slipwatch backcalc --save``). Its best fit is the
        strength applied to its material.
    sections : sequence of str
        Section ids to calibrate (each must have the material).
    who : str
        Who decided the calibration (recorded in the provenance).
    now : datetime
        Time of the calibration (timezone-aware).
    override : str, optional
        Why the calibration is stored although a check failed (recorded).

    Returns
    -------
    list of Calibration

    Raises
    ------
    ConfigError
        No best fit in the result, an empty name, an unknown section, a section without the
        material, or a strength the section cannot take.
    CalibrationRefused
        A check failed and no override was given.
    """
    data = case_result if isinstance(case_result, dict) else _result_dict(case_result)
    case, best = data["case"], data.get("best")
    if best is None:
        raise ConfigError(
            f"back-analysis of {case['id']!r} has no best fit (the surface match was not run); "
            "run `slipwatch backcalc` again with match_points > 0"
        )
    if not who or not who.strip():
        raise ConfigError("say who decides the calibration (--by NAME)")
    if override is not None and not override.strip():
        raise ConfigError("give the reason for the override (--override REASON), not an "
                          "empty text")
    reason = override.strip() if override else None
    sections = list(dict.fromkeys(sections))
    if not sections:
        raise ConfigError("name at least one section to calibrate (--sections ID ...)")
    material, form = case["material"], case["form"]
    strength = _strength_of(best, form)
    for section_id in sections:
        section, _ = current_section(workspace, store, section_id, now=now)
        if material not in {m.name for m in section.materials}:
            raise ConfigError(
                f"section {section_id!r} has no material {material!r} (known: "
                f"{', '.join(m.name for m in section.materials)}); calibrate only sections "
                "in the same material"
            )
    consistency = _consistency_of(data)
    slip_sections = set(case.get("sections", [case["section_id"]]))
    records = {sid: [] if sid in slip_sections else
               check_record(workspace, store, sid, material, strength, now)
               for sid in sections}  # fmt: skip
    failed = [c["detail"] for c in consistency if not c["passed"]]
    failed += [f"section {r.section_id}: {r.detail}" for rs in records.values() for r in rs
               if not r.passed]
    if failed and reason is None:
        raise CalibrationRefused(
            f"calibration with {material!r} {_describe(strength)} from back-analysis "
            f"{case['id']} refused: {'; '.join(failed)}. Check the back-analysis, or give "
            "--override REASON to store it anyway with the reason recorded"
        )
    provenance = (
        f"back-analysis {case['id']} (slip of {case['failed_utc']} on {case['section_id']}, "
        f"{case['method']}, {form}): {material!r} {_describe(strength)}; run {data['ran_utc']}"
        + (f" (back-analysis {data['back_analysis_id']})" if data.get("back_analysis_id") else "")
        + f"; calibrated by {who.strip()} on {utc_text(now)}"
        + (f"; checks overridden: {reason}" if failed else
           f"; override given but every check passed: {reason}" if reason else "")
    )
    done = []
    with store.atomic():
        for section_id in sections:
            follow_section_file(workspace, store, section_id, now)
            section, previous_id = current_section(workspace, store, section_id, now=now)
            base = store.section_version_row(previous_id)
            old = section.materials[section.material_index(material)]
            try:
                new_section = with_strength(section, material, **strength)
            except SectionError as error:
                raise ConfigError(f"section {section_id!r}: {error}") from None
            # The calibrated version rests on the same file as its base: it stays in force
            # until the file is edited (follow_section_file).
            version = store.record_section_version(
                section_id, section_to_dict(new_section), provenance, utc_text(now),
                file_sha256=base["file_sha256"],
            )
            row = store.latest_section_version(section_id)
            checks = tuple(consistency) + tuple(
                {"name": f"record {r.time_utc}" if r.time_utc else "record", **asdict(r)}
                for r in records[section_id])
            calibration_id = store.add_calibration({
                "back_analysis_id": data.get("back_analysis_id"), "section_id": section_id,
                "section_version_id": row["id"], "material": material,
                "strength_json": json.dumps(strength), "case_id": case["id"],
                "failed_utc": case["failed_utc"], "calibrated_by": who.strip(),
                "created_utc": utc_text(now), "checks_json": json.dumps(checks),
                "override_reason": reason,
            })  # fmt: skip
            done.append(Calibration(
                section_id=section_id, material=material, version=version, version_id=row["id"],
                previous_version_id=previous_id, before=_strength_dict(old),
                after=_strength_dict(new_section.materials[new_section.material_index(material)]),
                provenance=provenance, calibration_id=calibration_id, checks=checks,
                override_reason=reason,
            ))  # fmt: skip
    return done


def _consistency_of(data: dict) -> list[dict]:
    """The result's consistency checks; a result without them fails one check that says so."""
    consistency = data.get("consistency")
    if not isinstance(consistency, dict) or not consistency.get("checks"):
        return [{"name": "consistency", "passed": False,
                 "detail": "the result carries no consistency checks (written by an earlier "
                           "slipwatch, or without a best fit): run `slipwatch backcalc --save` "
                           "again"}]
    return [dict(c) for c in consistency["checks"]]


def _result_dict(case_result) -> dict:
    from watch.backcalc import result_to_dict  # backcalc builds on this module

    return result_to_dict(case_result)


def _strength_of(best: dict, form: str) -> dict:
    """Keyword arguments of ``with_strength`` for the best fit of a result of ``form``."""
    from watch.backcalc import FORMS

    if form not in FORMS:
        raise ConfigError(f"back-analysis result has an unknown form {form!r}")
    if FORMS[form][0] == "undrained":
        keys = {"undrained_strength": "undrained_strength_kpa"}
    else:
        keys = {"cohesion": "cohesion_kpa", "friction_angle": "friction_angle_deg"}
    strength = {}
    for name, key in keys.items():
        value = best.get(key)
        if not isinstance(value, (int, float)) or not math.isfinite(value):
            raise ConfigError(f"back-analysis result: best fit has no valid {key} ({value!r})")
        strength[name] = float(value)
    return strength


def _strength_dict(material) -> dict:
    if material.model == "undrained":
        return {"model": "undrained", "undrained_strength_kpa": material.undrained_strength,
                "strength_gradient_kpa_per_m": material.strength_gradient}
    return {"model": "drained", "cohesion_kpa": material.cohesion,
            "friction_angle_deg": material.friction_angle}


def _describe(strength: dict) -> str:
    if "undrained_strength" in strength:
        return f"Su = {strength['undrained_strength']:.2f} kPa"
    return f"c' = {strength['cohesion']:.2f} kPa, phi' = {strength['friction_angle']:.2f} deg"
