"""Layer: model.

PyTensor, which compiles the models, warns once per process when it finds no system BLAS
library to link, with advice on other installers. A bayeszi user installed with pip has
nothing to act on: PyTensor falls back to a product that still calls SciPy's BLAS, at a
measured 10-25% of a 2,000-record gradient (docs/performance.md, "BLAS"), and nutpie's
compiled models, used for big fits, do not need it. So that advice stays out of the user's
output; it alone is filtered here, by its exact opening words.
"""

import warnings

warnings.filterwarnings("ignore", message=r"PyTensor could not link to a BLAS installation",
                        category=UserWarning)
