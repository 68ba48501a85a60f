"""The model coma: Haser densities, excitation, line profiles, model images, interferometric filtering and the
response (flux per unit production rate)."""
