"""Old import path of the engine; the engine lives in probelog.engine (docs/engine.md)."""

from probelog.engine import *  # noqa: F403
from probelog.engine import __all__  # noqa: F401
from probelog.engine.calstep import AGREEMENT_FAIL, AGREEMENT_WARN  # noqa: F401
from probelog.engine.store import die_dir  # noqa: F401

import skrf  # noqa: F401  (tests patch probelog.session.skrf)
