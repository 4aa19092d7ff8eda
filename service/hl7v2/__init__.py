"""HL7 v2 intake: ORU^R01 messages in, ACK / FHIR result / ORU^R01 result out, and MLLP.

The adapter reads a message into the same ``Intake`` the FHIR adapter produces (one pipeline
after it), mapping fields as the HL7 V2-to-FHIR IG (1.0.0, STU 1) does:

* ``read_oru`` (intake.py): ORU^R01 -> ``Intake``;
* ``ack`` (ack.py), ``oru_result`` (result.py): the replies, pure functions;
* ``handle_v2`` (handle.py): one message, assessed and answered; what the HTTP route and the
  MLLP listener call;
* ``serve_mllp`` / ``start_mllp`` / ``run_mllp`` (mllp.py): the MLLP listener.

Parsing uses python-hl7 (``hl7``), wrapped in message.py so nothing else sees its tree.
"""

from service.hl7v2.ack import ack
from service.hl7v2.errors import Location, MessageInError, MessageRejected, V2Error
from service.hl7v2.handle import V2Response, handle_v2
from service.hl7v2.intake import read_oru
from service.hl7v2.message import V2Message, parse_message, v2_text
from service.hl7v2.mllp import run_mllp, serve_mllp, start_mllp
from service.hl7v2.result import oru_result

__all__ = [
    "Location",
    "MessageInError",
    "MessageRejected",
    "V2Error",
    "V2Message",
    "V2Response",
    "ack",
    "handle_v2",
    "oru_result",
    "parse_message",
    "read_oru",
    "run_mllp",
    "serve_mllp",
    "start_mllp",
    "v2_text",
]
