"""The caution every output carries (README, --help, tables, report, manifest)."""

CAUTION = (
    "Capacity figures are planning estimates built on sampled forage and published averages; "
    "they support, and never replace, field assessment, the managing agency's methods and "
    "local regulations. Herd-reduction figures are advisory."
)
