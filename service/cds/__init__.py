"""CDS Hooks 2.0: the assessment shown where the clinician is looking.

A thin adapter over the same assess path as ``$assess-hypoxaemia``: a hook request (prefetch,
or data fetched from the EHR's FHIR server) becomes one FHIR Bundle, the Bundle is read and
assessed by the ``Runtime``, and the Assessment becomes cards. Modules:

* ``services``   the discovery document: hooks served and their prefetch templates;
* ``request``    a hook request read and checked, every problem located;
* ``fetch``      the EHR's FHIR server, read within time, page, byte and entry budgets;
* ``prefetch``   prefetch values and fetched pages merged into one Bundle;
* ``orders``     draft oxygen and ventilator orders (``context.draftOrders``);
* ``view``       the ONE module that reads an ``Assessment`` (pattern, grades, findings,
                 numbers, data requests); everything after it reads only its ``AssessmentView``;
* ``cards``      the cards, from a view (and, for order hooks, the orders);
* ``feedback``   the feedback endpoint's body;
* ``jwks``, ``replay``, ``trust``  the EHR's signed JWT: keys, replay memory, verification;
* ``hooks``      the whole adapter as one object the HTTP routes call.

Nothing here knows FastAPI: the routes (``service/api/routes/cds.py``) turn ``CdsError`` into
OperationOutcome answers.
"""
