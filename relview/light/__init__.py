"""Light and colour: spectra, CIE colorimetry, Doppler tables, surfaces and skies."""
