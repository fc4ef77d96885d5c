"""Measured data: containers and file formats only (no physics is run here).

:mod:`.spectra` holds loss spectra (L3 or beta against a) with their HDF5 and CSV formats;
:mod:`.curves` holds decay curves and the campaign file format. The public names of both
are re-exported here.
"""

from .curves import (
    CAMPAIGN_SCHEMA,
    CAMPAIGN_SCHEMA_VERSION,
    Campaign,
    DecayCurve,
    read_campaign,
    read_curves_csv,
    write_campaign,
)
from .spectra import SCHEMA, SCHEMA_VERSION, LossSpectrum, read_csv, read_spectra, write_spectra

__all__ = ["LossSpectrum", "write_spectra", "read_spectra", "read_csv", "SCHEMA", "SCHEMA_VERSION",
           "DecayCurve", "Campaign", "write_campaign", "read_campaign", "read_curves_csv",
           "CAMPAIGN_SCHEMA", "CAMPAIGN_SCHEMA_VERSION"]
