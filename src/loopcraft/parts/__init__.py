"""Standard parts: IEC 60063 E-series values (``eseries``) and snapping a design to them (``snapping``)."""
