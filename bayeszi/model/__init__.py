"""Layer: model.

Two notes of the libraries below are kept out of the user's output here, each by its
exact opening words.

PyTensor, which compiles the models, warns once per process when it finds no system BLAS
library to link, with advice on other installers. A bayeszi user installed with pip has
nothing to act on: PyTensor falls back to a product that still calls SciPy's BLAS, at a
measured 10-25% of a 2,000-record gradient (docs/performance.md, "BLAS"), and nutpie's
compiled models, used for big fits, do not need it. So that advice stays out of the user's
output; it alone is filtered here, by its exact opening words.
"""

import logging
import warnings

warnings.filterwarnings("ignore", message=r"PyTensor could not link to a BLAS installation",
                        category=UserWarning)


class _OneChainShapeNote:
    """ArviZ logs "Shape validation failed" (an error-level line on standard error) when a
    diagnostic meets a single chain. bayeszi says what one chain means in its own words
    (R-hat cannot be computed: :mod:`bayeszi.model.diagnostics`), so that line alone is
    dropped from ArviZ's log.

    >>> _OneChainShapeNote().filter(logging.makeLogRecord({"msg": "Shape validation failed"}))
    False
    """

    def filter(self, record: logging.LogRecord) -> bool:
        return not str(record.getMessage()).startswith("Shape validation failed")


def _arviz_loggers() -> list[logging.Logger]:
    """ArviZ's loggers: the registered one and the one it logs with (built directly as
    ``Logger("arviz")``, so settings on ``logging.getLogger("arviz")`` do not reach it)."""
    import arviz

    own = getattr(arviz, "_log", None)
    return [logging.getLogger("arviz")] + ([own] if isinstance(own, logging.Logger) else [])


for _logger in _arviz_loggers():
    _logger.addFilter(_OneChainShapeNote())
