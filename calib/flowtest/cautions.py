"""Safety cautions shown with every flow-test result (common practice; defer to local rules)."""

CAUTIONS = (
    "Open and close hydrants slowly, one at a time, to avoid water hammer.",
    "Set up traffic control and watch where the water goes (flooding, erosion, drains; dechlorinate "
    "where required).",
    "Flowing can stir up discoloured water for customers and lowers fire protection while it lasts: "
    "notify the water utility and the fire service first.",
    "Keep every residual pressure at or above 20 psi (138 kPa) during the test (NFPA 291).",
    "Record tank levels and pump and valve status at the time of the test.",
    "These figures support, never replace, fire-protection design by a licensed engineer under the "
    "local codes and the authority having jurisdiction.",
)
