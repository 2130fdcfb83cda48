"""ringkit: design, simulate and analyse Aharonov-Bohm oscillations of mesoscopic rings.

Pipeline (each stage imports only from the ones before it):

``units`` → ``device`` → ``tightbinding`` → ``transport`` → ``analysis`` → ``view`` / ``cli``

``analysis`` needs only numpy/scipy (no kwant); computation modules never import matplotlib
or ipywidgets.
"""

from ringkit._validation import ParameterError
from ringkit._version import __version__

__all__ = ["__version__", "ParameterError"]
