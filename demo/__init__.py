"""Demo data of vsini: the fictional Lantern cluster observed with the invented Halcyon Echelle Spectrograph.

Installed as the package data ``vsini.demo_data`` so that ``vsini demo`` finds it without a source tree;
``demo/make_demo.py`` regenerates it.
"""

__all__: list[str] = []
