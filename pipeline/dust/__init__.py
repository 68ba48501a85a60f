"""The dust continuum: the solar model, Afrho, colour and dust production."""
