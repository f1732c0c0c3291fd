"""The safety caution printed wherever a result could reach a real machine."""

__all__ = ["CAUTION"]

CAUTION = (
    "Caution: simulation results do not make a controller safe for hardware. Before any use "
    "on a real machine, follow a documented risk assessment and the machine-safety standards "
    "that apply (e.g. ISO 12100, ISO 10218-1/-2, ISO/TS 15066, ISO 13849-1, IEC 62061), "
    "local codes and licensed practice."
)
