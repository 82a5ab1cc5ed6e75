"""Kind ``skops``: ``.skops`` files, loaded with skops' type checking.

Any type outside skops' safe list must be named in ``trusted_types``, else :class:`TrustError`
lists them with the plan line and the flags that would trust them.
"""

from __future__ import annotations

import hashlib

from probe.errors import ModelError, TrustError

from .messages import cause, plural, ticks
from .model import Model
from .options import Options
from .python import wrap_python

__all__ = ["load_skops"]


def load_skops(data: bytes, text: str, opts: Options) -> Model:
    """A Model from the bytes of a skops file, once every non-default type is trusted."""
    import skops.io as sio

    sha = hashlib.sha256(data).hexdigest()
    try:
        untrusted = list(sio.get_untrusted_types(data=data))
    except Exception as exc:
        raise ModelError(f"cannot read model file `{text}` as skops: {cause(exc)}") from exc
    refused = [t for t in untrusted if t not in opts.trusted_types]
    if refused:
        listed = ", ".join(f'"{t}"' for t in refused)
        flags = " ".join(f"--trust-type {t}" for t in refused)
        raise TrustError(
            f"model file `{text}` uses {plural(len(refused), 'type')} that skops does not "
            f"trust by default: {ticks(refused)}; if you trust its source, set "
            f"trusted_types = [{listed}] under [model] in the plan (or pass {flags})"
        )
    try:
        obj = sio.loads(data, trusted=untrusted)
    except Exception as exc:
        raise ModelError(f"cannot load model file `{text}`: {cause(exc)}") from exc
    return wrap_python(
        obj, spec=text, kind="skops", sha256=sha, opts=opts,
        details={"trusted_types": sorted(untrusted)},
    )
