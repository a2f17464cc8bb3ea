"""The gallery's figure scraper: sphinx-gallery's matplotlib scraper with a tight bounding box.

Some of the library's figures carry a caution below the axes; a tight box keeps it in the
picture. A class (not a function or lambda) so that Sphinx can pickle the configuration.
"""

from sphinx_gallery.scrapers import matplotlib_scraper


class TightFigures:
    """Save every open matplotlib figure with ``bbox_inches="tight"``."""

    def __repr__(self):
        return "TightFigures()"

    def __call__(self, block, block_vars, gallery_conf):
        return matplotlib_scraper(block, block_vars, gallery_conf, bbox_inches="tight")


class ReadingOrder:
    """Gallery order: from a first analysis to method development; other scripts after, by name."""

    ORDER = ("quickstart.py", "demo_analysis.py", "nsw_job_training.py", "cross_fitting.py",
             "bounds_sensitivity.py", "planning_bounds.py", "missing_data.py",
             "simulation_study.py")  # fmt: skip

    def __init__(self, src_dir):
        self.src_dir = src_dir

    def __repr__(self):
        return "ReadingOrder()"

    def __call__(self, filename):
        rank = self.ORDER.index(filename) if filename in self.ORDER else len(self.ORDER)
        return (rank, filename)
