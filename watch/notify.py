"""Delivery of queued notifications: a log file (always), e-mail over SMTP and webhooks.

The assessment cycle writes one ``notification_outbox`` row per state change, in the same
transaction as the change (watch.cycle). This module never edits those rows. It

1. gives every outbox row without deliveries one ``deliveries`` row per receiver: the log file,
   the e-mail addresses and webhooks configured for the row's level, and whoever was already
   told about the same alert (so everyone who heard "firing" also hears "resolved");
2. groups the pending deliveries of one site, channel and recipient into one message, at most
   one message per receiver per grouping window, so that a storm does not send forty e-mails.
   The message key is fixed when the message is formed: a retry re-sends the very same message
   under the same idempotency key (webhook header, e-mail Message-ID), so a receiver that got
   the first attempt after all can drop the copy;
3. sends the due messages with network timeouts, records every attempt, and on failure tries
   again later with exponential backoff. A message that still fails after ``max_attempts`` is
   marked failed, reported and written to the log file; ``retry_failed`` queues it again.

Nothing is lost while a receiver is down: its messages wait in the store and are delivered,
each once, when it answers again. Credentials come from environment variables named in the
configuration; their values are never written to the store or a log (errors are scrubbed).
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import json
import os
import smtplib
import ssl
import urllib.error
import urllib.request
from collections import Counter, defaultdict
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from email.message import EmailMessage
from email.utils import format_datetime
from pathlib import Path
from zoneinfo import ZoneInfo

from watch.clock import Clock
from watch.config import SiteConfig, TableReader
from watch.store import Store, parse_utc_text, utc_text
from watch.workspace import Workspace

__all__ = [
    "CHANNELS",
    "EVERY_LEVEL",
    "EmailSettings",
    "WebhookSettings",
    "NotifySettings",
    "notify_settings",
    "missing_credentials",
    "Message",
    "DeliveryReport",
    "deliver_pending",
    "retry_failed",
    "SIGNATURE_HEADER",
    "IDEMPOTENCY_HEADER",
    "signature",
]

CHANNELS = ("log", "email", "webhook")

#: Recipient-table key that receives notifications of every level (and those without a level).
EVERY_LEVEL = "*"

#: Header of webhook requests and e-mails that carries the message key.
IDEMPOTENCY_HEADER = "Slipwatch-Idempotency-Key"
#: Header of webhook requests carrying ``hmac-sha256=<hex>`` of the request body.
SIGNATURE_HEADER = "Slipwatch-Signature"
#: Webhook JSON format name and version.
WEBHOOK_FORMAT = "slipwatch-notifications/1"

#: Longest error text kept per attempt [characters].
_ERROR_CHARS = 500

_SMTP_SECURITY = ("starttls", "ssl", "none")
_KIND_WORDS = {
    "firing": "FIRING",
    "resolved": "RESOLVED",
    "escalated": "ESCALATED",
    "de-escalated": "DE-ESCALATED",
    "repeat": "STILL FIRING",
    "inspection": "INSPECTION REQUEST",
    "data": "DATA PROBLEM",
}


# --- configuration ----------------------------------------------------------------------------


@dataclass(frozen=True)
class EmailSettings:
    """SMTP server and the addresses per level. Credentials are the *names* of environment
    variables; their values are read only when a message is sent."""

    host: str
    port: int
    sender: str
    recipients: dict[str, tuple[str, ...]]  # level (or EVERY_LEVEL) -> addresses
    security: str = "starttls"  # one of _SMTP_SECURITY
    user_env: str | None = None
    password_env: str | None = None
    # The owner's explicit consent to log in over an unencrypted connection (a local relay).
    unencrypted_login_to_local_relay: bool = False

    def recipients_for(self, level: str | None) -> tuple[str, ...]:
        chosen = list(self.recipients.get(EVERY_LEVEL, ()))
        if level is not None:
            chosen += self.recipients.get(level, ())
        return tuple(dict.fromkeys(chosen))


@dataclass(frozen=True)
class WebhookSettings:
    """One receiver of JSON POSTs. ``levels`` None means every level."""

    name: str
    url: str
    levels: tuple[str, ...] | None = None
    secret_env: str | None = None

    def accepts(self, level: str | None) -> bool:
        return self.levels is None or level in self.levels


@dataclass(frozen=True)
class NotifySettings:
    """The ``[notify]`` table of site.toml (docs/formats.md section 2), with defaults."""

    log_file: Path
    group_window: timedelta = timedelta(minutes=5)
    timeout_seconds: float = 10.0
    retry_first: timedelta = timedelta(minutes=1)
    retry_max: timedelta = timedelta(hours=1)
    max_attempts: int = 12
    repeat_every: timedelta | None = None
    email: EmailSettings | None = None
    webhooks: tuple[WebhookSettings, ...] = ()

    def backoff(self, attempts: int) -> timedelta:
        """Wait before the next try after ``attempts`` failed ones: doubling, capped."""
        exponent = min(max(attempts - 1, 0), 30)  # 2**30 minutes exceeds any sensible cap
        return min(self.retry_first * (2**exponent), self.retry_max)

    def secret_variables(self) -> list[str]:
        """Names of the environment variables that hold credentials."""
        names = []
        if self.email is not None:
            names += [n for n in (self.email.user_env, self.email.password_env) if n]
        names += [w.secret_env for w in self.webhooks if w.secret_env]
        return names


def notify_settings(config: SiteConfig, root: Path) -> NotifySettings:
    """Read ``[notify]`` of the site file; the log file is relative to the workspace ``root``."""
    r = TableReader(str(config.path) if config.path else "site.toml")
    t = r.table(config.raw, "notify", "[notify]")
    where = "[notify]"
    r.keys(t, where, {"log_file", "group_window_minutes", "timeout_seconds", "retry_first_minutes",
                      "retry_max_minutes", "max_attempts", "repeat_hours", "email", "webhook"})  # fmt: skip
    log_file = Path(r.get(t, where, "log_file", str, default="notifications.log"))
    positive = {}
    for key, default in (("group_window_minutes", 5.0), ("timeout_seconds", 10.0),
                         ("retry_first_minutes", 1.0), ("retry_max_minutes", 60.0)):  # fmt: skip
        value = r.number(t, where, key, default=default)
        if value < 0 or (value == 0 and key != "group_window_minutes"):
            r.fail(where, key, f"must be {'>= 0' if key == 'group_window_minutes' else '> 0'}, got {value}")
        positive[key] = value
    if positive["retry_max_minutes"] < positive["retry_first_minutes"]:
        r.fail(where, "retry_max_minutes",
               f"({positive['retry_max_minutes']}) must not be below retry_first_minutes "
               f"({positive['retry_first_minutes']})")  # fmt: skip
    max_attempts = r.get(t, where, "max_attempts", int, default=12)
    if max_attempts < 1:
        r.fail(where, "max_attempts", f"must be >= 1, got {max_attempts}")
    repeat = r.number(t, where, "repeat_hours", default=None) if "repeat_hours" in t else None
    if repeat is not None and repeat <= 0:
        r.fail(where, "repeat_hours", f"must be > 0 (leave it out for no repeats), got {repeat}")
    webhooks = tuple(_webhook(r, w, i) for i, w in enumerate(r.array(t, "webhook")))
    names = [w.name for w in webhooks]
    for name in names:
        if names.count(name) > 1:
            r.fail(f"[[notify.webhook]] {name!r}", "name", "is used more than once")
    return NotifySettings(
        log_file=log_file if log_file.is_absolute() else root / log_file,
        group_window=timedelta(minutes=positive["group_window_minutes"]),
        timeout_seconds=positive["timeout_seconds"],
        retry_first=timedelta(minutes=positive["retry_first_minutes"]),
        retry_max=timedelta(minutes=positive["retry_max_minutes"]),
        max_attempts=max_attempts,
        repeat_every=None if repeat is None else timedelta(hours=repeat),
        email=_email(r, r.table(t, "email", "[notify.email]")) if "email" in t else None,
        webhooks=webhooks,
    )


def _email(r: TableReader, t: dict) -> EmailSettings:
    where = "[notify.email]"
    r.keys(t, where, {"host", "port", "sender", "security", "user_env", "password_env", "recipients",
                      "unencrypted_login_to_local_relay"})  # fmt: skip
    security = r.choice(t, where, "security", _SMTP_SECURITY) if "security" in t else "starttls"
    consent = r.get(t, where, "unencrypted_login_to_local_relay", bool, default=False)
    port = r.get(t, where, "port", int, default=465 if security == "ssl" else 587)
    if not 0 < port < 65536:
        r.fail(where, "port", f"must be 1..65535, got {port}")
    sender = r.get(t, where, "sender", str)
    if "@" not in sender:
        r.fail(where, "sender", f"must be an e-mail address, got {sender!r}")
    user_env = _env_name(r, t, where, "user_env")
    password_env = _env_name(r, t, where, "password_env")
    if (user_env is None) != (password_env is None):
        r.fail(where, "password_env" if password_env is None else "user_env",
               "must be given together with the other: both or neither")  # fmt: skip
    if security == "none" and user_env is not None and not consent:
        # The user name and password would cross the network in clear (base64 is no encryption).
        r.fail(where, "security", "'none' with user_env/password_env would send the SMTP user name and "
                                  "password unencrypted; use 'starttls' or 'ssl', or, for a relay on this "
                                  "machine or a trusted local network only, set "
                                  "unencrypted_login_to_local_relay = true")  # fmt: skip
    table = r.table(t, "recipients", "[notify.email.recipients]", required=True)
    recipients = {}
    for level, addresses in table.items():
        if not (isinstance(addresses, list) and addresses and all(isinstance(a, str) and "@" in a for a in addresses)):
            r.fail("[notify.email.recipients]", level, f"must be a list of e-mail addresses, got {addresses!r}")
        recipients[level] = tuple(addresses)
    return EmailSettings(
        host=r.get(t, where, "host", str), port=port, sender=sender, recipients=recipients,
        security=security, user_env=user_env, password_env=password_env,
        unencrypted_login_to_local_relay=consent,
    )  # fmt: skip


def _webhook(r: TableReader, t: dict, i: int) -> WebhookSettings:
    name = t.get("name")
    where = f"[[notify.webhook]] {name!r}" if isinstance(name, str) else f"[[notify.webhook]] #{i + 1}"
    r.keys(t, where, {"name", "url", "levels", "secret_env"})
    name = r.get(t, where, "name", str)
    url = r.get(t, where, "url", str)
    if not url.startswith(("http://", "https://")):
        r.fail(where, "url", f"must start with http:// or https://, got {url!r}")
    levels = t.get("levels")
    if levels is not None and not (isinstance(levels, list) and all(isinstance(v, str) for v in levels)):
        r.fail(where, "levels", f"must be a list of level names, got {levels!r}")
    return WebhookSettings(name=name, url=url, levels=None if levels is None else tuple(levels),
                           secret_env=_env_name(r, t, where, "secret_env"))  # fmt: skip


def _env_name(r: TableReader, t: dict, where: str, key: str) -> str | None:
    name = r.get(t, where, key, str, default=None)
    if name is not None and not name.replace("_", "").isalnum():
        # A value that is not a variable name is most likely the secret itself: refuse it
        # without echoing it.
        r.fail(where, key, "must be the NAME of an environment variable (letters, digits, _), "
                           "not the secret itself")  # fmt: skip
    return name


def missing_credentials(settings: NotifySettings, environ=os.environ) -> list[str]:
    """Names of the configured credential variables that are not set (for a check at start)."""
    return [name for name in settings.secret_variables() if not environ.get(name)]


# --- messages ---------------------------------------------------------------------------------


@dataclass(frozen=True)
class Message:
    """One grouped message to one receiver. Rebuilt identically from the store for every
    attempt (its text depends only on the rows and the time it was formed)."""

    key: str
    channel: str
    recipient: str
    site_id: str
    subject: str
    text: str
    payload: dict
    grouped_utc: str
    outbox_ids: tuple[int, ...]


def _compose(key: str, channel: str, recipient: str, rows: list[dict], config: SiteConfig,
             settings: NotifySettings) -> Message:  # fmt: skip
    rows = sorted(rows, key=lambda r: (r["outbox_id"], r["round"]))
    site_id = rows[0]["site_id"]
    site_name = config.name if config.id == site_id and config.name else site_id
    zone = ZoneInfo(config.time_zone) if config.id == site_id else None
    grouped = rows[0]["grouped_utc"]
    counts = Counter(_kind_word(r) for r in rows)
    tally = ", ".join(f"{word.lower()} {n}" for word, n in counts.items())
    if len(rows) == 1:
        own = rows[0]["subject"]
        # The cycle's subjects usually name slipwatch and the site already.
        subject = _prefix(rows[0]) + (own if own.startswith("[slipwatch") else f"[slipwatch {site_id}] {own}")
    else:
        subject = f"[slipwatch {site_id}] {len(rows)} notifications: {tally}"
    lines = [f"slipwatch: {site_name} (site {site_id})"]
    if len(rows) > 1:
        lines += [f"{len(rows)} notifications ({tally}), grouped within "
                  f"{_minutes(settings.group_window)} and sent together:"]  # fmt: skip
        lines += [f"  {i}. {_headline(r)}" for i, r in enumerate(rows, start=1)]
        lines.append("")
    for i, r in enumerate(rows, start=1):
        number = f"{i} of {len(rows)}: " if len(rows) > 1 else ""
        lines += ["-" * 72, f"{number}{_headline(r, with_subject=False)}, raised {_when(r['created_utc'], zone)}",
                  "", r["subject"], "", r["body"].rstrip(), ""]  # fmt: skip
    lines += ["-" * 72, f"Message {key}, formed {_when(grouped, zone)}. Times are UTC unless marked "
              "otherwise. This is decision support: check the slope and the data before acting."]  # fmt: skip
    payload = {
        "format": WEBHOOK_FORMAT,
        "message_key": key,
        "site": {"id": site_id, "name": site_name},
        "grouped_utc": grouped,
        "summary": subject,
        "notifications": [
            {
                "outbox_id": r["outbox_id"], "idempotency_key": r["idempotency_key"],
                "reminder": r["round"], "section_id": r["section_id"], "alert_id": r["alert_id"],
                "kind": r["kind"], "level": r["level"], "subject": r["subject"], "body": r["body"],
                "created_utc": r["created_utc"], "details": json.loads(r["payload_json"]),
            }  # fmt: skip
            for r in rows
        ],
    }
    return Message(key, channel, recipient, site_id, subject, "\n".join(lines) + "\n", payload, grouped,
                   tuple(r["outbox_id"] for r in rows))  # fmt: skip


def _kind_word(row: dict) -> str:
    return "REMINDER" if row["round"] else _KIND_WORDS.get(row["kind"], row["kind"].upper())


def _prefix(row: dict) -> str:
    return f"REMINDER {row['round']} (still firing): " if row["round"] else ""


def _headline(row: dict, with_subject: bool = True) -> str:
    parts = [_kind_word(row) + (f" {row['round']} (still firing)" if row["round"] else "")]
    if row["level"]:
        parts.append(f"level {row['level']}")
    if row["section_id"]:
        parts.append(f"section {row['section_id']}")
    return ", ".join(parts) + (f": {row['subject']}" if with_subject else "")


def _when(text: str, zone: ZoneInfo | None) -> str:
    moment = parse_utc_text(text)
    shown = moment.strftime("%Y-%m-%d %H:%M UTC")
    if zone is not None and zone.key != "UTC":
        shown += f" ({moment.astimezone(zone).strftime('%H:%M %Z')} local)"
    return shown


def _minutes(span: timedelta) -> str:
    return f"{span.total_seconds() / 60:g} minutes"


def _message_key(channel: str, recipient: str, delivery_ids: list[int]) -> str:
    digest = hashlib.sha256(f"{channel}\n{recipient}\n{sorted(delivery_ids)}".encode()).hexdigest()
    return f"sw-{digest[:32]}"


def signature(secret: str, body: bytes) -> str:
    """Value of the webhook signature header: ``hmac-sha256=`` + hex HMAC-SHA256 of the body."""
    return "hmac-sha256=" + hmac.new(secret.encode(), body, hashlib.sha256).hexdigest()


# --- channels ---------------------------------------------------------------------------------


class _SendError(Exception):
    """A send failed; the message says why, without any credential."""


def _send(message: Message, settings: NotifySettings, clock: Clock, environ) -> None:
    if message.channel == "log":
        _send_log(message, settings)
    elif message.channel == "email":
        if settings.email is None:
            raise _SendError("e-mail is no longer configured ([notify.email] missing in site.toml)")
        _send_email(message, settings.email, settings.timeout_seconds, clock, environ)
    elif message.channel == "webhook":
        hook = next((w for w in settings.webhooks if w.name == message.recipient), None)
        if hook is None:
            raise _SendError(f"webhook {message.recipient!r} is no longer in site.toml [[notify.webhook]]")
        _send_webhook(message, hook, settings.timeout_seconds, environ)
    else:
        raise _SendError(f"unknown channel {message.channel!r}")


def _send_log(message: Message, settings: NotifySettings) -> None:
    path = settings.log_file
    path.parent.mkdir(parents=True, exist_ok=True)
    block = f"==== {message.grouped_utc} {message.key}\n{message.subject}\n{message.text}\n"
    with path.open("a", encoding="utf-8") as handle:
        handle.write(block)
        handle.flush()
        os.fsync(handle.fileno())


def _credential(name: str, environ) -> str:
    value = environ.get(name)
    if not value:
        raise _SendError(f"environment variable {name} (named in [notify]) is not set")
    return value


def _send_email(message: Message, email: EmailSettings, timeout: float, clock: Clock, environ) -> None:
    mail = EmailMessage()
    mail["From"] = email.sender
    mail["To"] = message.recipient
    mail["Subject"] = message.subject
    mail["Date"] = format_datetime(clock.now())
    # Derived from the message key: a retry carries the same Message-ID, so mail systems and
    # readers can recognise the copy.
    mail["Message-ID"] = f"<{message.key}@{email.sender.rpartition('@')[2]}>"
    mail[IDEMPOTENCY_HEADER] = message.key
    mail.set_content(message.text)
    credentials = None
    if email.user_env and email.password_env:
        credentials = (_credential(email.user_env, environ), _credential(email.password_env, environ))
    context = ssl.create_default_context()
    if email.security == "ssl":
        server = smtplib.SMTP_SSL(email.host, email.port, timeout=timeout, context=context)
    else:
        server = smtplib.SMTP(email.host, email.port, timeout=timeout)
    with server:
        server.ehlo()
        if email.security == "starttls":
            server.starttls(context=context)
            server.ehlo()
        if credentials is not None:
            server.login(*credentials)
        refused = server.send_message(mail)
    if refused:
        raise _SendError(f"server refused {', '.join(refused)}")


def _send_webhook(message: Message, hook: WebhookSettings, timeout: float, environ) -> None:
    body = json.dumps(message.payload, sort_keys=True).encode("utf-8")
    headers = {"Content-Type": "application/json; charset=utf-8", IDEMPOTENCY_HEADER: message.key,
               "User-Agent": "slipwatch"}  # fmt: skip
    if hook.secret_env:
        headers[SIGNATURE_HEADER] = signature(_credential(hook.secret_env, environ), body)
    request = urllib.request.Request(hook.url, data=body, headers=headers, method="POST")
    try:
        with urllib.request.urlopen(request, timeout=timeout) as response:
            status = response.status
    except urllib.error.HTTPError as error:
        raise _SendError(f"HTTP {error.code} {error.reason} from webhook {hook.name!r}") from None
    if not 200 <= status < 300:
        raise _SendError(f"HTTP {status} from webhook {hook.name!r}")


def _secret_forms(secrets: list[str]) -> list[str]:
    """The credentials as they may appear in a server's reply: plain, and base64 as SMTP AUTH
    sends them (LOGIN: each alone; PLAIN: NUL user NUL password, RFC 4616), longest first."""
    values = [s for s in secrets if s]
    encoded = [*values, *(f"\0{a}\0{b}" for a in values for b in values if a != b)]
    forms = set(values) | {base64.b64encode(v.encode()).decode() for v in encoded}
    # Unpadded too: a reply may quote the base64 without its trailing '='.
    forms |= {f.rstrip("=") for f in forms if len(f.rstrip("=")) >= 4}
    return sorted(forms, key=len, reverse=True)


def _scrub(text: str, secrets: list[str]) -> str:
    """An error text without any form of the credentials (before it is stored or logged)."""
    for form in _secret_forms(secrets):
        text = text.replace(form, "***")
    return text[:_ERROR_CHARS]


# --- delivery -------------------------------------------------------------------------------------


@dataclass
class DeliveryReport:
    """What one ``deliver_pending`` call did."""

    deliveries_created: int = 0
    reminders_created: int = 0
    messages_sent: int = 0
    attempts_failed: int = 0
    gave_up: list[str] = field(default_factory=list)  # message key: receiver: last error
    errors: list[str] = field(default_factory=list)  # receiver: error of this call's failures
    waiting: int = 0  # deliveries still pending after this call (grouping window or backoff)
    stopped: bool = False  # left early because a stop was requested

    def lines(self) -> list[str]:
        lines = [
            f"notifications: {self.deliveries_created} deliveries queued"
            + (f" (+{self.reminders_created} reminders)" if self.reminders_created else "")
            + f", {self.messages_sent} messages sent, {self.attempts_failed} failed attempts, "
            f"{self.waiting} deliveries waiting"
            + (" (stopped early on request)" if self.stopped else "")
        ]
        lines += [f"  send failed: {e}" for e in self.errors]
        lines += [f"  GIVEN UP: {g}" for g in self.gave_up]
        return lines


def deliver_pending(workspace: Workspace, store: Store, clock: Clock, *,
                    should_stop: Callable[[], bool] | None = None, environ=None) -> DeliveryReport:  # fmt: skip
    """Queue, group and send everything that is due; return what was done.

    Safe to call as often as wanted: a row is queued once per receiver, a message is formed at
    most once per receiver and grouping window, and only due messages (new, or past their
    backoff) are sent. ``should_stop`` is asked between messages; a stop leaves the rest
    queued for the next call. Network waits are bounded by ``timeout_seconds`` per operation.
    """
    environ = os.environ if environ is None else environ
    config = workspace.config()
    settings = notify_settings(config, workspace.root)
    now = clock.now()
    report = DeliveryReport()
    with store.atomic():
        report.deliveries_created = _queue_new_rows(store, settings, _log_recipient(settings, workspace), now)
        if settings.repeat_every is not None:
            report.reminders_created = _queue_reminders(store, settings, now)
        _form_messages(store, settings, now)
    secrets = [environ.get(name, "") for name in settings.secret_variables()]
    failed_receivers: set[tuple[str, str]] = set()
    for key in store.due_delivery_messages(utc_text(now)):
        if should_stop is not None and should_stop():
            report.stopped = True
            break
        rows = store.delivery_message_rows(key)
        if not rows:
            continue
        channel, recipient = rows[0]["channel"], rows[0]["recipient"]
        if (channel, recipient) in failed_receivers:
            continue  # it just failed: do not wait out another timeout in this call
        message = _compose(key, channel, recipient, rows, config, settings)
        try:
            _send(message, settings, clock, environ)
            error = None
        except Exception as exc:  # noqa: BLE001 - any failure of a receiver is recorded and retried
            error = _scrub(f"{type(exc).__name__}: {exc}", secrets)
        attempt = rows[0]["attempts"] + 1
        at = clock.now()
        give_up = error is not None and attempt >= settings.max_attempts
        with store.atomic():
            store.record_delivery_attempt(
                key, channel, recipient, attempt, utc_text(at), error, list(message.outbox_ids),
                next_attempt_utc=utc_text(at + settings.backoff(attempt)), give_up=give_up,
            )  # fmt: skip
        if error is None:
            report.messages_sent += 1
            continue
        report.attempts_failed += 1
        failed_receivers.add((channel, recipient))
        report.errors.append(f"{channel} {recipient}: {error}")
        if give_up:
            line = f"{key} to {channel} {recipient}: {error} (after {attempt} attempts)"
            report.gave_up.append(line)
            if channel != "log":
                _log_give_up(settings, at, line, message)
    report.waiting = store.pending_delivery_count()
    return report


def retry_failed(store: Store, clock: Clock, message_key: str | None = None) -> int:
    """Queue failed messages (one, or all) again with a fresh allowance of attempts; return the
    number of deliveries requeued."""
    with store.atomic():
        return store.requeue_failed_deliveries(utc_text(clock.now()), message_key)


def _log_recipient(settings: NotifySettings, workspace: Workspace) -> str:
    """The log file as a recipient: relative to the workspace when inside it."""
    try:
        return str(settings.log_file.relative_to(workspace.root))
    except ValueError:
        return str(settings.log_file)


def _queue_new_rows(store: Store, settings: NotifySettings, log_name: str, now: datetime) -> int:
    created = 0
    stamp = utc_text(now)
    for row in store.outbox_rows_without_deliveries():
        receivers = [("log", log_name)]
        if settings.email is not None:
            receivers += [("email", a) for a in settings.email.recipients_for(row["level"])]
        receivers += [("webhook", w.name) for w in settings.webhooks if w.accepts(row["level"])]
        if row["alert_id"] is not None:
            # Everyone told about this alert hears every later change of it ("resolved" included),
            # whatever the level of the later row.
            receivers += store.alert_receivers(row["alert_id"])
        receivers = list(dict.fromkeys(receivers))
        created += store.add_deliveries((row["id"], c, rcpt, 0, stamp) for c, rcpt in receivers)
    return created


def _queue_reminders(store: Store, settings: NotifySettings, now: datetime) -> int:
    """Reminders of standing alarms (firing, told as such, neither acknowledged nor shelved):
    one more delivery of the alarm's newest notification to each receiver it was sent to,
    once the last one sent to that receiver is ``repeat_every`` old."""
    created = 0
    stamp = utc_text(now)
    cutoff = utc_text(now - settings.repeat_every)
    for outbox_id, channel, recipient, last_round in store.standing_alarm_deliveries(stamp, cutoff):
        created += store.add_deliveries([(outbox_id, channel, recipient, last_round + 1, stamp)])
    return created


def _form_messages(store: Store, settings: NotifySettings, now: datetime) -> None:
    stamp = utc_text(now)
    groups: dict[tuple[str, str, str], list[int]] = defaultdict(list)
    for delivery_id, site_id, channel, recipient in store.ungrouped_deliveries():
        groups[(site_id, channel, recipient)].append(delivery_id)
    for (site_id, channel, recipient), ids in groups.items():
        last = store.last_grouped_utc(site_id, channel, recipient)
        # The log is the local record and costs nothing: it is written at once.
        if channel != "log" and last is not None and now - parse_utc_text(last) < settings.group_window:
            continue
        store.group_deliveries(ids, _message_key(channel, recipient, ids), stamp)


def _log_give_up(settings: NotifySettings, at: datetime, line: str, message: Message) -> None:
    path = settings.log_file
    path.parent.mkdir(parents=True, exist_ok=True)
    with path.open("a", encoding="utf-8") as handle:
        handle.write(f"==== {utc_text(at)} DELIVERY GIVEN UP: {line}\n"
                     f"The undelivered message follows; tell its readers another way.\n"
                     f"{message.subject}\n{message.text}\n")  # fmt: skip
        handle.flush()
        os.fsync(handle.fileno())
