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
