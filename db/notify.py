"""Outgoing e-mail for high-priority alarms, with the standard library (``smtplib``, ``email``).

Configured by the site file's optional ``[notify]`` section (:class:`ops_logic.site.Notify`)::

    [notify]
    host = "mail.example.org"
    port = 587
    from = "fishway-alarms@example.org"
    to = ["duty-operator@example.org"]
    starttls = true
    username = "fishway-alarms"
    password_env = "FISHWAY_SMTP_PASSWORD"   # the password is never in the file

Which alarms are mailed (:class:`MailPlanner`, pure: time is an argument):

- annunciations only (an alarm put in front of the operator: ``AlarmEvent.annunciated``) of
  priority ``max_priority`` or higher (default 1: high only);
- **rate limit**: at most one mail per alarm per ``rate_limit_minutes`` (an alarm that clears
  and comes back within that time is not mailed again);
- **digest**: during an alarm flood (the engine's :attr:`~ops_logic.alarms.engine.AlarmEngine.
  flood`, EEMUA 191), or when more than ``digest_after`` alarms are due at once, the alarms go
  into one digest mail instead, at most one digest per ``rate_limit_minutes``; alarms that come
  up while a digest is held back wait for the next one (which is sent as soon as it is due,
  flood or not).

Sending (:class:`EmailNotifier`) never blocks the caller: :meth:`EmailNotifier.notify` plans
and queues, and returns at once; one background thread talks to the server (with a timeout).
A failure is logged (logger ``db.notify``) and written to the ``feed_health`` row
:data:`HEALTH_FEED` (``ok=False`` with the error), so it shows with the feeds on the dashboard;
a success sets the row back to ok. A full queue drops the mail, loudly the same way.

>>> from datetime import UTC, datetime
>>> from ops_logic.alarms.states import AlarmEvent
>>> from ops_logic.site import Notify
>>> cfg = Notify(host="127.0.0.1", from_="a@example.org", to=["b@example.org"])
>>> t = datetime(2026, 7, 1, 12, 0, tzinfo=UTC)
>>> e = AlarmEvent(t, "do_low_low@east", "do_low_low", "east", "raised", "unacknowledged",
...                "normal", 1, 3.8, message="dissolved oxygen 3.8 mg/L", annunciated=True)
>>> planner = MailPlanner(cfg, "Demo site")
>>> [m.subject for m in planner.plan([e], t)]
['[Demo site] HIGH alarm: do_low_low@east']
>>> planner.plan([e], t)     # the same alarm again within the rate limit: nothing
[]
"""
from __future__ import annotations

import logging
import os
import queue
import smtplib
import ssl
import threading
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime, timedelta
from email.message import EmailMessage
from zoneinfo import ZoneInfo

from sqlalchemy.engine import Engine

from db.feed_health import update_feed_health
from ops_logic.alarms.engine import FloodStatus
from ops_logic.alarms.states import PRIORITY_NAMES, AlarmEvent
from ops_logic.site import Notify

__all__ = ["HEALTH_FEED", "EmailNotifier", "Mail", "MailPlanner"]

HEALTH_FEED = "notify:email"
"""The ``feed_health`` row of the e-mail channel."""

_log = logging.getLogger("db.notify")


@dataclass(frozen=True)
class Mail:
    """One planned mail: subject, body, the alarm keys it tells of, whether it is a digest, and
    the evaluation time it was planned at."""

    subject: str
    body: str
    keys: tuple[str, ...]
    digest: bool
    at: datetime


class MailPlanner:
    """Which alarms to mail, and the mails; see the module docstring.

    Parameters
    ----------
    config : the site's ``[notify]`` section.
    site_name : shown in each subject.
    time_zone : the site's time zone (times are given in UTC and local time).
    """

    def __init__(self, config: Notify, site_name: str, time_zone: str = "UTC"):
        self.config = config
        self.site_name = site_name
        self.tz = ZoneInfo(time_zone)
        self.rate = timedelta(minutes=config.rate_limit_minutes)
        self.last_sent: dict[str, datetime] = {}
        self.last_digest: datetime | None = None
        self.pending: list[AlarmEvent] = []
        self.rate_limited = 0
        """Annunciations not mailed because their alarm was mailed within the rate limit."""

    def _times(self, t: datetime) -> str:
        return (f"{t.astimezone(ZoneInfo('UTC')):%Y-%m-%d %H:%M:%S} UTC "
                f"({t.astimezone(self.tz):%Y-%m-%d %H:%M} local)")

    def _line(self, e: AlarmEvent) -> str:
        where = f"fishway {e.fishway_id}" if e.fishway_id else "site"
        return (f"{self._times(e.ts)}  {PRIORITY_NAMES[e.priority].upper():6}  {e.key} "
                f"({where}): {e.message or e.why}")

    def _single(self, e: AlarmEvent, now: datetime) -> Mail:
        where = f"fishway {e.fishway_id}" if e.fishway_id else "the site"
        body = "\n".join([
            f"{PRIORITY_NAMES[e.priority].capitalize()}-priority alarm at {self.site_name}, "
            f"{where}.", "",
            f"Alarm:     {e.key} (rule {e.rule})",
            f"Raised:    {self._times(e.ts)}",
            f"Condition: {e.message or e.why}",
            f"State:     {e.state.replace('_', ' ')}", "",
            "Acknowledge it on the fishway dashboard. Further mails about this alarm are held "
            f"back for {self.config.rate_limit_minutes:g} minutes."])
        return Mail(f"[{self.site_name}] {PRIORITY_NAMES[e.priority].upper()} alarm: {e.key}",
                    body, (e.key,), False, now)

    def _digest(self, events: Sequence[AlarmEvent], now: datetime,
                flood: FloodStatus | None) -> Mail:
        flooding = flood is not None and flood.active
        head = [f"{len(events)} alarm(s) at {self.site_name} since the last mail"
                + (" during an alarm flood" if flooding else "") + ":", ""]
        if flooding and flood is not None:
            head[0:0] = [f"Alarm flood since {self._times(flood.started_at)}"
                         if flood.started_at else "Alarm flood",
                         f"First out: {flood.first_out} ({flood.count} alarms so far)", ""]
        body = "\n".join([*head, *(self._line(e) for e in events), "",
                          "Acknowledge them on the fishway dashboard."])
        subject = (f"[{self.site_name}] {len(events)} alarms"
                   + (" (alarm flood)" if flooding else ""))
        return Mail(subject, body, tuple(e.key for e in events), True, now)

    def plan(self, events: Sequence[AlarmEvent], now: datetime,
             flood: FloodStatus | None = None) -> list[Mail]:
        """The mails to send after an evaluation at ``now`` that returned ``events``."""
        due: list[AlarmEvent] = []
        seen: set[str] = set()
        for e in events:
            if not e.annunciated or e.priority > self.config.max_priority or e.key in seen:
                continue
            seen.add(e.key)
            last = self.last_sent.get(e.key)
            if last is not None and now - last < self.rate:
                self.rate_limited += 1
                continue
            due.append(e)
        for e in due:
            self.last_sent[e.key] = now
        flooding = flood is not None and flood.active
        if flooding or len(due) > self.config.digest_after or self.pending:
            self.pending += due
            if self.pending and (self.last_digest is None or now - self.last_digest >= self.rate):
                mail = self._digest(self.pending, now, flood)
                self.pending, self.last_digest = [], now
                return [mail]
            return []
        return [self._single(e, now) for e in due]


class EmailNotifier:
    """The e-mail channel of a site: plans with :class:`MailPlanner`, sends in the background.

    Parameters
    ----------
    config : the site's ``[notify]`` section.
    site_name, time_zone : for the mails (the site file's ``[site]`` name and zone).
    engine : the database whose ``feed_health`` shows the channel's health (optional).
    queue_size : mails waiting at most; more are dropped (and the drop reported).
    """

    def __init__(self, config: Notify, site_name: str, *, time_zone: str = "UTC",
                 engine: Engine | None = None, queue_size: int = 100):
        self.config = config
        self.planner = MailPlanner(config, site_name, time_zone)
        self.engine = engine
        self._queue: queue.Queue[Mail | None] = queue.Queue(maxsize=queue_size)
        self._thread: threading.Thread | None = None
        self._lock = threading.Lock()
        self.sent = 0
        self.failed = 0
        self.last_error: str | None = None

    def notify(self, events: Sequence[AlarmEvent], now: datetime,
               flood: FloodStatus | None = None) -> int:
        """Plan the mails for an evaluation's events and queue them; return how many were
        queued. Never waits for the server."""
        with self._lock:
            mails = self.planner.plan(events, now, flood)
        queued = 0
        for mail in mails:
            try:
                self._queue.put_nowait(mail)
                queued += 1
            except queue.Full:
                self._failure(mail, "mail queue full: mail dropped")
        if queued:
            self._start()
        return queued

    def _start(self) -> None:
        with self._lock:
            if self._thread is None or not self._thread.is_alive():
                self._thread = threading.Thread(target=self._run, name="alarm-mail",
                                                daemon=True)
                self._thread.start()

    def _run(self) -> None:
        while True:
            mail = self._queue.get()
            try:
                if mail is None:
                    return
                self._deliver(mail)
            finally:
                self._queue.task_done()

    def _message(self, mail: Mail) -> EmailMessage:
        msg = EmailMessage()
        msg["Subject"] = mail.subject
        msg["From"] = self.config.from_
        msg["To"] = ", ".join(self.config.to)
        msg.set_content(mail.body)
        return msg

    def _deliver(self, mail: Mail) -> None:
        c = self.config
        try:
            password = None
            if c.password_env is not None:
                password = os.environ.get(c.password_env)
                if password is None:
                    raise RuntimeError(f"environment variable {c.password_env} (password_env) "
                                       "is not set")
            with smtplib.SMTP(c.host, c.port, timeout=c.timeout_s) as smtp:
                if c.starttls:
                    smtp.starttls(context=ssl.create_default_context())
                if c.username is not None and password is not None:
                    smtp.login(c.username, password)
                smtp.send_message(self._message(mail))
        except Exception as exc:  # every failure of the channel is reported, none raised
            self._failure(mail, f"{type(exc).__name__}: {exc}")
            return
        self.sent += 1
        self._health(mail.at, ok=True)

    def _failure(self, mail: Mail, error: str) -> None:
        self.failed += 1
        self.last_error = error
        _log.error("alarm mail %r to %s:%s not sent: %s", mail.subject, self.config.host,
                   self.config.port, error)
        self._health(mail.at, ok=False, error=error)

    def _health(self, at: datetime, *, ok: bool, error: str | None = None) -> None:
        if self.engine is None:
            return
        try:
            update_feed_health(self.engine, HEALTH_FEED, at, ok=ok, error=error)
        except Exception:  # the database being down must not stop the mail thread
            _log.exception("could not record the e-mail channel's health")

    def flush(self, timeout_s: float = 30.0) -> bool:
        """Wait until every queued mail was sent or failed (at most ``timeout_s``); True when
        the queue is empty."""
        deadline = threading.Event()
        done = threading.Thread(target=lambda: (self._queue.join(), deadline.set()),
                                daemon=True)
        done.start()
        return deadline.wait(timeout_s)

    def close(self, timeout_s: float = 30.0) -> None:
        """Send what is queued, then stop the thread."""
        thread = self._thread
        if thread is None or not thread.is_alive():
            return
        self._queue.put(None)
        thread.join(timeout_s)
