"""Stars: photometry, stellar tracks, convective envelope, placing stars on tracks."""
