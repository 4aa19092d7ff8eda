"""Prometheus metrics, counts only, written in the text exposition format (version 0.0.4).

Written here rather than with ``prometheus-client``: the service needs four counters, one
gauge and one histogram, all updated from the event loop of one process, and the text format is
a few lines. That keeps a dependency (and its multiprocess mode, with its shared directory) out
of the image. Metrics are per process; the deployment runs one worker per pod and scales pods.

Labels take values from closed sets only (route templates, status codes, verdict patterns,
finding codes of the rule set), so nothing from a request body reaches them.
"""

from __future__ import annotations

from bisect import bisect_left
from collections import defaultdict
from collections.abc import Iterable

# Seconds; fine below 25 ms, where the assess path lives, coarse above.
BUCKETS = (0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0)

Labels = tuple[tuple[str, str], ...]


def _escape(value: str) -> str:
    return value.replace("\\", "\\\\").replace("\n", "\\n").replace('"', '\\"')


def _labels(labels: Labels, extra: Labels = ()) -> str:
    pairs = labels + extra
    if not pairs:
        return ""
    return "{" + ",".join(f'{name}="{_escape(value)}"' for name, value in pairs) + "}"


def _number(value: float) -> str:
    return str(int(value)) if float(value).is_integer() else repr(float(value))


class Counter:
    """A monotonically increasing count per label set."""

    def __init__(self, name: str, help_text: str) -> None:
        self.name, self.help = name, help_text
        self.values: defaultdict[Labels, float] = defaultdict(float)

    def inc(self, labels: Labels = (), amount: float = 1.0) -> None:
        self.values[labels] += amount

    def lines(self) -> Iterable[str]:
        yield f"# HELP {self.name} {self.help}"
        yield f"# TYPE {self.name} counter"
        for labels, value in sorted(self.values.items()):
            yield f"{self.name}{_labels(labels)} {_number(value)}"


class Gauge(Counter):
    """A value that goes up and down."""

    def dec(self, labels: Labels = ()) -> None:
        self.values[labels] -= 1.0

    def set(self, value: float, labels: Labels = ()) -> None:
        self.values[labels] = value

    def lines(self) -> Iterable[str]:
        for line in super().lines():
            yield line.replace(" counter", " gauge") if line.startswith("# TYPE") else line


class Histogram:
    """Observations counted into cumulative buckets, with their sum and count."""

    def __init__(self, name: str, help_text: str, buckets: tuple[float, ...] = BUCKETS) -> None:
        self.name, self.help, self.buckets = name, help_text, buckets
        self.counts: dict[Labels, list[int]] = {}
        self.sums: defaultdict[Labels, float] = defaultdict(float)

    def observe(self, value: float, labels: Labels = ()) -> None:
        counts = self.counts.setdefault(labels, [0] * (len(self.buckets) + 1))
        counts[bisect_left(self.buckets, value)] += 1
        self.sums[labels] += value

    def lines(self) -> Iterable[str]:
        yield f"# HELP {self.name} {self.help}"
        yield f"# TYPE {self.name} histogram"
        for labels, counts in sorted(self.counts.items()):
            running = 0
            for bound, count in zip((*self.buckets, float("inf")), counts, strict=True):
                running += count
                le = "+Inf" if bound == float("inf") else _number(bound)
                yield f"{self.name}_bucket{_labels(labels, (('le', le),))} {running}"
            yield f"{self.name}_sum{_labels(labels)} {self.sums[labels]!r}"
            yield f"{self.name}_count{_labels(labels)} {running}"


class Metrics:
    """Every metric the service exposes."""

    def __init__(self) -> None:
        self.requests = Counter(
            "oxyrule_http_requests_total", "HTTP requests by route template, method and status."
        )
        self.duration = Histogram(
            "oxyrule_http_request_duration_seconds", "Time to answer an HTTP request, by route."
        )
        self.in_flight = Gauge(
            "oxyrule_assessments_in_flight", "Assessment requests being answered now."
        )
        self.verdicts = Counter("oxyrule_verdicts_total", "Assessed Bundles by verdict pattern.")
        self.findings = Counter(
            "oxyrule_findings_total", "Findings reported in results, by finding code."
        )
        self.rejected = Counter(
            "oxyrule_inputs_rejected_total",
            "Input Bundles (or NDJSON lines) refused with an OperationOutcome, by issue code.",
        )
        self.cds_cards = Counter(
            "oxyrule_cds_cards_total", "CDS Hooks cards returned, by service and indicator."
        )
        self.cds_quiet = Counter(
            "oxyrule_cds_no_card_total", "CDS Hooks calls answered with no card, by service."
        )
        self.cds_feedback = Counter(
            "oxyrule_cds_feedback_total",
            "CDS Hooks card feedback, by service, outcome and override reason code.",
        )
        self.cds_refused = Counter(
            "oxyrule_cds_refused_total",
            "CDS Hooks calls refused, by HTTP status and issue code.",
        )
        self.cds_reads = Counter(
            "oxyrule_cds_fhir_reads_total",
            "Prefetch keys read from the EHR's FHIR server (not sent by the client), by key.",
        )
        self.ruleset = Gauge(
            "oxyrule_ruleset_info", "The loaded rule set (always 1), labelled with its identity."
        )
        self.v2_messages = Counter(
            "oxyrule_hl7v2_messages_total",
            "HL7 v2 messages answered, by transport (http, mllp) and MSA-1 (AA, AE, AR).",
        )
        self.mllp_connections = Gauge(
            "oxyrule_mllp_connections", "MLLP connections open now (peers being served)."
        )
        self.mllp_refused = Counter(
            "oxyrule_mllp_refused_total",
            "MLLP connections refused or frames refused for a budget, by reason.",
        )
        self.buffered_bytes = Gauge(
            "oxyrule_buffered_bytes",
            "Request body bytes held now, of OXYRULE_MAX_BUFFERED_BYTES (HTTP) and of "
            "OXYRULE_MLLP_MAX_BUFFERED_BYTES (MLLP), by budget.",
        )

    def request(self, route: str, method: str, status: int, seconds: float) -> None:
        self.requests.inc((("route", route), ("method", method), ("status", str(status))))
        self.duration.observe(seconds, (("route", route),))

    def verdict(self, pattern: str, findings: Iterable[str]) -> None:
        self.verdicts.inc((("pattern", pattern),))
        for code in findings:
            self.findings.inc((("code", code),))

    def rejection(self, code: str) -> None:
        self.rejected.inc((("code", code),))

    def cds_answer(self, service: str, indicators: Iterable[str], fetched: Iterable[str]) -> None:
        count = 0
        for indicator in indicators:
            self.cds_cards.inc((("service", service), ("indicator", indicator)))
            count += 1
        if not count:
            self.cds_quiet.inc((("service", service),))
        for key in fetched:
            self.cds_reads.inc((("key", key),))

    def cds_refusal(self, status: int, code: str) -> None:
        self.cds_refused.inc((("status", str(status)), ("code", code)))

    def v2_message(self, transport: str, ack: str) -> None:
        self.v2_messages.inc((("transport", transport), ("ack", ack)))

    def render(self) -> str:
        metrics = (
            self.requests,
            self.duration,
            self.in_flight,
            self.verdicts,
            self.findings,
            self.rejected,
            self.cds_cards,
            self.cds_quiet,
            self.cds_feedback,
            self.cds_refused,
            self.cds_reads,
            self.ruleset,
            self.v2_messages,
            self.mllp_connections,
            self.mllp_refused,
            self.buffered_bytes,
        )
        return "\n".join(line for metric in metrics for line in metric.lines()) + "\n"
