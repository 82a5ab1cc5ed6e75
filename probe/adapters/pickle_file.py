"""Kind ``pickle``: ``.joblib``, ``.pkl`` and ``.pickle`` files, unpickled with joblib.

Unpickling executes whatever code the file names, so :func:`~probe.adapters.load_model` refuses
these files unless ``trust_pickle`` is set or ``sha256`` pins the file. The bytes are read once:
the recorded SHA-256 is of the bytes that were loaded.
"""

from __future__ import annotations

import hashlib
import io

from probe.errors import ModelError

from .messages import cause
from .model import Model
from .options import Options
from .python import wrap_python

__all__ = ["load_pickle"]


def load_pickle(data: bytes, text: str, opts: Options, *, trust: str) -> Model:
    """A Model from the bytes of a pickle or joblib file; the caller checked the trust, which
    came from ``trust`` (``"flag"``: the person said so; ``"sha256"``: the pinned hash matched)."""
    import joblib

    sha = hashlib.sha256(data).hexdigest()
    try:
        obj = joblib.load(io.BytesIO(data))
    except ModuleNotFoundError as exc:
        raise ModelError(
            f"loading model file `{text}` needs the module `{exc.name}`, which is not installed"
        ) from exc
    except Exception as exc:
        raise ModelError(f"cannot load model file `{text}`: {cause(exc)}") from exc
    return wrap_python(obj, spec=text, kind="pickle", sha256=sha, opts=opts,
                       details={"trust": trust})
