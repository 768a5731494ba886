"""Hooks of the independent API tester (schemathesis) for isotint's conformance run.

`refused_only_for_what_no_schema_can_state` checks that a request valid by the OpenAPI
description is never refused for its form: every 4xx answer to such a request must be one of
the refusals a description cannot state - an unknown or expired id (404, 410), a conflict with
stored state (409), an opaque cursor the list did not make (400 invalid_cursor), or values
judged against a photo's contents, the calibration or each other (422 undecodable_image,
invalid_calibration, invalid_input). Anything else (a missing, unknown or repeated field, a JSON
part of the wrong shape, a query the server cannot read, a wrong content type) fails the check.

`map_body` sends the demo calibration's id (ISOTINT_DEMO_CALIBRATION) where a request names a
calibration by a well-formed id, so map and series requests get past the lookup to the photos.
"""

import json
import os
import re

import schemathesis

ALLOWED = {
    404: {"not_found"},
    409: {"conflict"},
    410: {"expired"},
    400: {"invalid_cursor"},
    422: {"undecodable_image", "invalid_calibration", "invalid_input"},
}

UUID = re.compile(r"^[0-9a-fA-F]{8}-[0-9a-fA-F]{4}-[0-9a-fA-F]{4}-[0-9a-fA-F]{4}-[0-9a-fA-F]{12}$")


@schemathesis.check
def refused_only_for_what_no_schema_can_state(ctx, response, case):
    meta = case.meta
    if meta is None or not meta.generation.mode.is_positive:
        return None
    status = response.status_code
    if status < 400 or status >= 500:
        return None
    try:
        code = json.loads(response.content)["error"]["code"]
    except (ValueError, KeyError, TypeError):
        code = None
    if code not in ALLOWED.get(status, set()):
        raise AssertionError(
            f"a request valid by the description was refused: {status} {code}: "
            f"{response.content[:300]!r}"
        )
    return None


@schemathesis.hook
def map_body(ctx, body):
    demo = os.environ.get("ISOTINT_DEMO_CALIBRATION")
    calibration = body.get("calibration") if isinstance(body, dict) else None
    if demo and isinstance(calibration, str) and UUID.match(calibration):
        body["calibration"] = demo
    return body
