"""Events: event files, VOEvent packets and HEALPix sky maps."""
