"""Everything above the wire: recipes, safety, plans, runs, the judge, the store and the CLI."""

import logging

__version__ = "0.1.0"

logging.getLogger(__name__).addHandler(logging.NullHandler())
