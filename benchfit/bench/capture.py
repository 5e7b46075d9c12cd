"""Swept capture saved segment by segment, so nothing measured is ever lost.

The frequency grid is split into segments that land on grid points.  In
``sweep`` mode each segment is one native sweep of the instrument (configure
start/stop/points, trigger, ``*OPC?``, read the frequency axis the instrument
reports and the data); in ``step`` mode each point is its own segment (set
the CW frequency, trigger, ``*OPC?``, read one point).

After each segment its rows are appended to the output CSV and fsync'd, then
a small manifest (``OUT.csv.capture.json``) recording how many rows are safely
on disk, and the frequency of the last, is atomically replaced.  The output is a
canonical sweep CSV (:mod:`benchfit.data.canonical`) after every append.  At the
end the header is rewritten atomically with the end time, then the manifest is
marked complete.

``resume`` follows one rule (:func:`resume_offset`): the acknowledged rows are
the manifest's count, checked against the rows actually in the file; the file is
cut only after the last of them (a torn last line, rows of a segment whose
manifest update never landed), never inside them, whatever the file's size or
header says.  A kill at any write (tested at every one) therefore resumes with
no duplicate, no missing point and no acknowledged row lost.
"""

from __future__ import annotations

import datetime as _dt
import json
import os
import signal
import threading
from collections.abc import Callable
from typing import Any

import numpy as np

from benchfit.bench.blocks import parse_ascii
from benchfit.bench.capturefile import (  # noqa: F401 - re-exported
    CaptureFile,
    _header_text,
    _row,
    manifest_path,
    resume_offset,
    scan_capture_file,
)
from benchfit.bench.capturesettings import MAX_POINTS, CaptureResult, CaptureSettings  # noqa: F401
from benchfit.bench.profile import Profile
from benchfit.bench.readings import (  # noqa: F401 - to_complex re-exported
    prepare_instrument,
    read_cw_point,
    to_complex,
    trigger_and_wait,
)
from benchfit.bench.session import Session
from benchfit.data.canonical import read_canonical_sweep
from benchfit.data.response import FrequencyResponse
from benchfit.errors import InputError, InstrumentError
from benchfit.fileio import (
    append_lines_durable,
    check_output_path,
    read_json,
    write_json_atomic,
    write_text_atomic,
)
from benchfit.provenance import Provenance


def _now() -> str:
    return _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds")


class StopFlag:
    """First Ctrl-C asks the loop to stop after the current point; a second aborts."""

    def __init__(self) -> None:
        self.requested = False
        self._old = None

    def __enter__(self) -> StopFlag:
        if threading.current_thread() is threading.main_thread():
            self._old = signal.signal(signal.SIGINT, self._handle)
        return self

    def _handle(self, signum, frame) -> None:
        if self.requested:
            raise KeyboardInterrupt
        self.requested = True

    def __exit__(self, *exc) -> None:
        if self._old is not None:
            signal.signal(signal.SIGINT, self._old)


class Capture:
    """One capture into one file (fresh or resumed).

    Parameters
    ----------
    session
        An open instrument session whose profile is an analyzer profile.
    settings
        What to measure.
    out
        Output CSV path; the manifest sits beside it.
    resource
        Resource name recorded in the file.
    progress
        Called as ``progress(points_saved, points_total)`` after each segment.
    """

    def __init__(self, session: Session, settings: CaptureSettings, out: str | os.PathLike, *,
                 resource: str = "", progress: Callable[[int, int], None] | None = None) -> None:
        settings.validate()
        self.session = session
        self.profile: Profile = session.profile
        self.settings = settings
        self.out = check_output_path(out)  # a device or pipe is refused before anything is read
        self.manifest_file = check_output_path(manifest_path(out))
        self.resource = resource or session.name
        self.progress = progress or (lambda done, total: None)
        self.warnings: list[str] = []
        self._check_profile()

    def _check_profile(self) -> None:
        p, s = self.profile, self.settings
        if p.kind != "analyzer":
            raise InputError(f"profile {p.name!r} is a {p.kind} profile; capture needs an analyzer "
                             "profile", source="--profile")
        if s.mode == "step":
            p.require("cw", "--mode step")
        if s.level_v is not None:
            p.require("level", "--level")
        if s.bandwidth_hz is not None:
            p.require("bandwidth", "--bandwidth")
        if s.mode == "sweep":
            p.require(f"spacing_{s.spacing}", f"--spacing {s.spacing}")

    # ----- files ---------------------------------------------------------------------
    def _write_manifest(self, m: dict[str, Any]) -> None:
        m["updated"] = _now()
        write_json_atomic(self.manifest_file, m)

    def _fresh(self, idn: str) -> dict[str, Any]:
        if self.out.exists() and not self._holds_nothing():
            raise InputError("output file exists; pass --resume to continue that capture or "
                             "choose another file", source=str(self.out))
        started = _now()
        meta = {"instrument": idn, "profile": self.profile.name, "resource": self.resource,
                "settings": self.settings.to_dict(), "start_time": started, "end_time": None,
                "complete": False}
        prov = Provenance(step="capture", sources=(self.resource,),
                          settings={"profile": self.profile.name, **self.settings.to_dict()})
        header = _header_text(meta, prov, self.settings.quantity)
        write_text_atomic(self.out, header)
        m = {"kind": "capture_manifest", "version": 1, "settings": self.settings.to_dict(),
             "profile": self.profile.name, "resource": self.resource, "instrument": idn,
             "started": started, "segments_total": len(self.settings.segments()),
             "segments_done": 0, "rows": 0, "bytes": len(header.encode("utf-8")), "last_freq_hz": None,
             "complete": False}
        self._write_manifest(m)
        return m

    def _holds_nothing(self) -> bool:
        """True for an unfinished capture file with no row and no manifest (killed while the
        capture was creating it): starting again loses nothing."""
        if self.manifest_file.exists():
            return False
        try:
            scan = scan_capture_file(self.out)
        except InputError:
            return False
        return scan.rows == 0 and scan.meta.get("complete") is False

    def _manifest_or_header(self, scan: CaptureFile | None) -> dict[str, Any]:
        """The manifest; or, for a file killed before its first manifest landed (no rows yet),
        the manifest its header implies."""
        if self.manifest_file.exists():
            m = read_json(self.manifest_file)
            if m.get("kind") != "capture_manifest":
                raise InputError("not a capture manifest", source=str(self.manifest_file))
            return m
        if scan is not None and scan.rows == 0 and scan.meta.get("complete") is False \
                and isinstance(scan.meta.get("settings"), dict):
            meta = scan.meta
            return {"kind": "capture_manifest", "version": 1, "settings": meta["settings"],
                    "profile": meta.get("profile"), "resource": meta.get("resource"),
                    "instrument": meta.get("instrument"), "started": meta.get("start_time"),
                    "segments_total": len(self.settings.segments()), "segments_done": 0,
                    "rows": 0, "bytes": scan.header_end, "last_freq_hz": None, "complete": False}
        raise InputError(f"no capture manifest {self.manifest_file.name} beside it; nothing to "
                         "resume (remove the file to start again)", source=str(self.out))

    def _resumed(self) -> dict[str, Any]:
        try:
            scan = scan_capture_file(self.out) if self.out.exists() else None
        except InputError:
            if self.manifest_file.exists():
                raise
            scan = None  # and no manifest: nothing to resume (said by _manifest_or_header)
        m = self._manifest_or_header(scan)
        old = CaptureSettings.from_dict(m.get("settings", {})).to_dict()
        for key, value in self.settings.to_dict().items():
            if old.get(key) != value:
                opt = "--" + key.replace("_hz", "").replace("_v", "").replace("_", "-")
                raise InputError(f"{value!r} differs from the capture being resumed ({old.get(key)!r}); "
                                 "resume with the same settings", source=opt)
        if m.get("profile") != self.profile.name:
            raise InputError(f"{self.profile.name!r} differs from the capture being resumed "
                             f"({m.get('profile')!r})", source="--profile")
        if scan is None:
            raise InputError("output file is missing; cannot resume", source=str(self.out))
        n, done = m.get("rows"), m.get("segments_done")
        if not isinstance(n, int) or not isinstance(done, int) or n < 0:
            raise InputError("manifest lacks its row and segment counts; cannot resume safely",
                             source=str(self.manifest_file))
        if scan.meta.get("complete") is True:
            return self._finished_before(m, scan)
        m["complete"] = False  # the header is not rewritten yet: the end of the capture is still to do
        cut = resume_offset(scan, n, m.get("last_freq_hz"), str(self.out))
        if scan.size > cut:
            self.warnings.append(f"discarded {scan.size - cut} bytes after the last saved row "
                                 "(a torn or unacknowledged write); they are measured again")
            with open(self.out, "r+b") as fh:
                fh.truncate(cut)
                fh.flush()
                os.fsync(fh.fileno())
        m["bytes"] = cut
        return m

    def _finished_before(self, m: dict[str, Any], scan: CaptureFile) -> dict[str, Any]:
        """The header says complete: the end-of-capture rewrite landed.  The file is the
        finished capture when it holds every row its header counts (at least the manifest's);
        the manifest is then brought up to date, and nothing is measured or cut."""
        points = scan.meta.get("points")
        whole = scan.rows > 0 and points == scan.rows >= int(m["rows"]) \
            and scan.size == scan.row_ends[-1]
        if not whole:
            raise InputError(f"header says the capture is complete with {points} points but "
                             f"{scan.rows} complete rows follow it; it was changed afterwards, "
                             "so it is not resumed (nothing was cut)", source=str(self.out))
        if not m.get("complete"):
            m.update(complete=True, rows=scan.rows, bytes=scan.size,
                     segments_done=len(self.settings.segments()),
                     last_freq_hz=scan.row_freqs[-1],
                     finished=scan.meta.get("end_time") or _now())
            self._write_manifest(m)
        return m

    def _finish_file(self, m: dict[str, Any], finished: str) -> None:
        text = self.out.read_text(encoding="utf-8")
        lines = text.split("\n")
        for i, line in enumerate(lines[:8]):
            if line.startswith("# meta: "):
                meta = json.loads(line[len("# meta: "):])
                meta.update(end_time=finished, complete=True, points=m["rows"],
                            session=self.session.stats())
                lines[i] = "# meta: " + json.dumps(meta, default=str)
        new = "\n".join(lines)
        write_text_atomic(self.out, new)
        m.update(complete=True, bytes=len(new.encode("utf-8")), finished=finished)
        self._write_manifest(m)

    # ----- instrument ----------------------------------------------------------------
    def _configure(self) -> None:
        p, s, ses = self.profile, self.settings, self.session
        stale = prepare_instrument(ses, p, reset=p.reset_on_start)  # earlier errors are not ours
        if stale:
            self.warnings.append("cleared earlier instrument errors: "
                                 + "; ".join(f"{c} {t}" for c, t in stale))
        if s.level_v is not None:
            ses.configure(p.command("level", level_v=s.level_v))
        if s.bandwidth_hz is not None:
            ses.configure(p.command("bandwidth", bandwidth_hz=s.bandwidth_hz))
        if s.mode == "sweep":
            ses.configure(p.command(f"spacing_{s.spacing}"))
            if p.has("sweep_mode"):
                ses.configure(p.command("sweep_mode"))
        elif p.has("step_mode"):
            ses.configure(p.command("step_mode"))

    def _measure_sweep(self, f: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        p, ses = self.profile, self.session
        ses.configure(p.command("start", start_hz=float(f[0])))
        ses.configure(p.command("stop", stop_hz=float(f[-1])))
        ses.configure(p.command("points", points=int(f.size)))
        trigger_and_wait(self.session, self.profile)
        axis = self._sweep_axis(f)
        data_cmd = p.command("data_query")
        h = to_complex(ses.query_values(data_cmd), p.response_form, what=data_cmd)
        if axis.size != h.size:
            raise InstrumentError(f"frequency axis has {axis.size} points but the data has {h.size}",
                                  resource=self.session.name, command=data_cmd)
        if axis.size != f.size:
            self.warnings.append(f"instrument measured {axis.size} points where {f.size} were asked "
                                 f"({f[0]:g}..{f[-1]:g} Hz); its own frequency axis is used")
        return axis, h

    def _read_back(self, key: str, asked: float) -> float:
        """The instrument's own value of a sweep setting when the profile can query it."""
        if not self.profile.has(key):
            return asked
        cmd = self.profile.command(key)
        return float(parse_ascii(self.session.query(cmd), what=cmd)[0])

    def _sweep_axis(self, f: np.ndarray) -> np.ndarray:
        """Frequencies of the sweep just measured.

        With an ``axis_query`` the instrument says them.  SCPI-1999 has no such query for
        every analyzer, so without one the axis is rebuilt from the standard settings: start,
        stop and points (read back when the profile has their queries, which catches an
        instrument that rounded them) and the sweep's spacing.
        """
        p, s = self.profile, self.settings
        if p.has("axis_query"):
            return self.session.query_values(p.command("axis_query"))
        lo = self._read_back("start_query", float(f[0]))
        hi = self._read_back("stop_query", float(f[-1]))
        n = int(round(self._read_back("points_query", float(f.size))))
        if not (np.isfinite(lo) and np.isfinite(hi) and 0 < lo < hi) or n < 2:
            raise InstrumentError(f"instrument reports start {lo:g} Hz, stop {hi:g} Hz, {n} points: "
                                  "cannot rebuild the frequency axis", resource=self.session.name,
                                  command=p.command("trigger"))
        i = np.arange(n) / (n - 1)
        return lo * (hi / lo) ** i if s.spacing == "log" else lo + (hi - lo) * i

    def _measure_point(self, f: float) -> tuple[np.ndarray, np.ndarray]:
        f_read, h = read_cw_point(self.session, self.profile, f)
        return np.array([f_read]), h

    # ----- the loop ------------------------------------------------------------------
    def run(self, *, resume: bool = False) -> CaptureResult:
        """Capture (or continue) the whole grid; returns what was saved.

        Raises
        ------
        InstrumentError
            On an instrument error, lost connection or exhausted retries; every
            segment finished before it is on disk and ``resume`` continues.
        """
        m = self._resumed() if resume else None
        idn = self.session.identify()
        if m is not None and m.get("complete"):
            return self._result(m, "complete")
        if m is not None and m.get("instrument") != idn:
            self.warnings.append(f"resuming with instrument {idn!r}; the capture began with "
                                 f"{m.get('instrument')!r}")
        self._configure()
        if m is None:
            m = self._fresh(idn)
        grid = self.settings.grid()
        segs = self.settings.segments()
        total = self.settings.points
        status = "complete"
        self.progress(m["rows"], total)
        with StopFlag() as stop:
            try:
                for k in range(int(m["segments_done"]), len(segs)):
                    if stop.requested:
                        status = "interrupted"
                        break
                    i0, i1 = segs[k]
                    if self.settings.mode == "step":
                        f, h = self._measure_point(float(grid[i0]))
                    else:
                        f, h = self._measure_sweep(grid[i0:i1])
                    self._append(m, k, f, h)
                    self.progress(m["rows"], total)
                if status == "complete":
                    self.session.check_errors("end of capture")
            except KeyboardInterrupt:
                status = "interrupted"
            except InstrumentError as e:
                raise InstrumentError(f"{e}; {m['rows']} of {total} points are saved in {self.out}; "
                                      "run the same command with --resume to continue") from None
            except InputError as e:  # the output could not be written (disk full)
                raise InputError(f"{e.message}; {m['rows']} of {total} points are saved; make room "
                                 "and run the same command with --resume to continue",
                                 source=e.source) from None
        if status == "complete":
            self._finish_file(m, _now())
            read_canonical_sweep(self.out)  # the finished file must read back
        return self._result(m, status)

    def _append(self, m: dict[str, Any], k: int, f: np.ndarray, h: np.ndarray) -> None:
        last = m.get("last_freq_hz")
        rows = []
        for fi, hi in zip(f, h, strict=True):
            if not (np.isfinite(fi) and fi > 0 and np.isfinite(hi)):
                raise InstrumentError(f"instrument returned a non-finite point at {fi} Hz",
                                      resource=self.session.name)
            if last is not None and fi <= last:
                self.warnings.append(f"dropped {fi:g} Hz: not above the previous point {last:g} Hz")
                continue
            rows.append(_row(float(fi), complex(hi)))
            last = float(fi)
        if rows:
            append_lines_durable(self.out, rows)
        m.update(segments_done=k + 1, rows=m["rows"] + len(rows), bytes=self.out.stat().st_size,
                 last_freq_hz=last)
        self._write_manifest(m)

    def _result(self, m: dict[str, Any], status: str) -> CaptureResult:
        return CaptureResult(
            path=str(self.out), manifest_path=str(self.manifest_file), status=status,
            points_saved=int(m["rows"]), points_total=self.settings.points,
            instrument=str(m.get("instrument", "")), profile=self.profile.name, resource=self.resource,
            started=str(m.get("started", "")), finished=str(m.get("finished", "")),
            settings=self.settings.to_dict(), session=self.session.stats(),
            warnings=tuple(self.warnings),
            provenance=Provenance(step="capture", sources=(self.resource,),
                                  settings={"profile": self.profile.name, "out": str(self.out),
                                            **self.settings.to_dict()}))


def run_capture(session: Session, settings: CaptureSettings, out: str | os.PathLike, *,
                resume: bool = False, resource: str = "",
                progress: Callable[[int, int], None] | None = None) -> CaptureResult:
    """Capture ``settings`` from ``session`` into ``out`` (see :class:`Capture`)."""
    return Capture(session, settings, out, resource=resource, progress=progress).run(resume=resume)


def read_capture(out: str | os.PathLike) -> FrequencyResponse:
    """Read a capture file (finished or partial) as a FrequencyResponse."""
    return read_canonical_sweep(out)
