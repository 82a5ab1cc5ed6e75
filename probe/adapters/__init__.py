"""The black-box model adapters: every model spec becomes one :class:`Model`.

The protocol
------------
Everything downstream of this module sees a model only through one method::

    model.scores(frame) -> np.ndarray   # float64, read-only, shape (len(frame),), in [0, 1]

the probability of the positive class for each row; the decision is ``scores >= threshold``.
:func:`load_model` turns a spec into a :class:`Model`:

=============================  ============  ====================================================
spec                           kind          how it is scored
=============================  ============  ====================================================
``model.joblib|.pkl|.pickle``  ``pickle``    the unpickled estimator (needs ``trust_pickle``
                                             or a ``sha256`` pin)
``model.skops``                ``skops``     the estimator, loaded with skops' type checking
``model.txt|.lgb``             ``lightgbm``  ``lightgbm.Booster.predict`` (also any text file
                                             that starts with ``tree``)
``model.onnx``                 ``onnx``      onnxruntime on the CPU (``pip install 'probe[onnx]'``)
``py:MODULE:ATTR``             ``python``    an object with ``predict_proba`` (or
                                             ``decision_function`` / ``predict``), or a function
                                             ``f(frame) -> scores``
``cmd:COMMAND``                ``command``   a program: CSV with a header on stdin, one score per
                                             line on stdout, once per batch
``http(s)://HOST:PORT/PATH``   ``http``      POST ``{"records": [...]}``, answer a JSON list of
                                             numbers or ``{"scores": [...]}``, once per batch
``column:NAME``                ``column``    the scores are already a column of the data
(an in-memory object)          ``object``    as for ``py:``; the Python API passes it directly
=============================  ============  ====================================================

The adapter selects and orders the model's input columns (``Model.feature_names``: from
``feature_names_in_``, the booster's feature names, the ONNX inputs or the ``feature_names``
argument; ``None`` passes the whole frame), scores in batches, and normalises the output to one
positive-class score: the ``predict_proba`` column of the positive class (``classes_`` matched to
``positive``, where ``1 == "1" == True``; else the last column); a logistic sigmoid of
``decision_function`` when that is all the model has (so threshold 0.5 is margin 0); 0/1 hard
labels when it only has ``predict``. :meth:`Model.describe` records which.

Every failure is one :class:`~probe.errors.ModelError` line that names the model spec and, for a
scoring failure, the rows of the failing batch (positions counted from 0, both ends included):
"model `cmd:python score.py` failed on rows 50000–99999: <first line of the cause>". Scores that
are NaN or infinite, of the wrong length, or outside [0, 1] for a probability output are failures
too: a wrong number never travels silently. The input frame is never modified.

The trust model
---------------
Loading a pickle (``.joblib``, ``.pkl``, ``.pickle``) executes whatever code the file names, so it
is refused with :class:`~probe.errors.TrustError` unless the person running probe says so
(``trust_pickle=True``; ``--trust-pickle`` on every command), or the file is pinned:
``sha256="<hex>"`` (``sha256 = "..."`` under ``[model]``) refuses any file with another hash and
trusts a pickle whose hash matches. A plan file cannot grant the trust by itself. The refusal
prints the file's hash, and ``describe()["trust"]`` records where the trust came from (``"flag"``
or ``"sha256"``). The file is read once; its SHA-256 is computed on those bytes and the model is
loaded from the same bytes, so the recorded hash is the hash of what ran. skops files are checked
with ``skops.io.get_untrusted_types`` first: any type outside skops' safe list must be named in
``trusted_types`` (``trusted_types = [...]`` in the plan, ``--trust-type`` on the command line),
otherwise :class:`~probe.errors.TrustError` lists them. LightGBM and ONNX files are data, not code
(a LightGBM text file is checked whole before LightGBM parses it: a cut file is refused as damaged
or truncated). ``py:`` and ``cmd:`` specs name code the user chose to run, so they need no flag. A
model that records no input names (``py:``, ``cmd:``, ``http:`` without ``feature_names``) is given
every column of the frame it is asked to score: pass ``feature_names`` to send only the inputs
(``probe run`` never passes the label).

Isolation and time limits
-------------------------
Model files and ``py:`` models are loaded and scored in a child process of their own
(``isolate=True``, the default; :mod:`.isolated`): a native crash, an exit (with any code) or a
hang inside the model becomes one :class:`~probe.errors.ModelError` line, and probe goes on to
exit 2. ``load_model(..., timeout=600.0)`` bounds loading and then each batch for every kind
that runs outside this process: the isolated child and a ``cmd:`` command are killed, an
``http(s)://`` request gives up when the endpoint stays silent that long. ``column:`` (no code),
an in-memory object passed to the API, and anything loaded with ``isolate=False`` run in this
process with no time limit.

Labels and levels
-----------------
``positive`` is the label's positive value; when the model's ``classes_`` do not hold it (a model
trained on 0/1, a holdout labelled yes/no) the error names both, and ``positive_class`` says which
of the model's classes means it. Where the model records the levels of a categorical input
(``Model.categories``), rows holding a value it never saw are counted before scoring and refused,
unless ``allow_unseen=True``: then they are scored as the model treats unknown values and counted
in ``describe()["unseen_values"]``.

Where the code is
-----------------
One module per kind: ``pickle_file``, ``skops_file``, ``lightgbm_file``, ``onnx_file``,
``python`` (``py:`` and in-memory objects; pickle and skops files end there too), ``remote``
(``cmd:`` and ``http:``), ``column``. Around them: ``load`` (:func:`load_model`, spec dispatch),
``isolated`` (the parent's side of a child process) and ``worker`` (the child's), ``options``
(its validated options), ``model`` (:class:`Model`: columns, batches, output checks),
``unseen`` (values the model never saw),
``labels`` (which output is the positive class), ``inputs`` (input names and numeric columns),
``encoders`` (levels known to scikit-learn encoders), ``files`` and ``messages`` (paths, bytes and
error text).
"""

from .load import ACCEPTED_SPECS, load_model
from .model import Model

__all__ = ["ACCEPTED_SPECS", "Model", "load_model"]
