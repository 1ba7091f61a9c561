"""Axis model: motor, load and drive parameters as an engineer groups them, and what follows.

Values are in the model's convention (PMSM: per phase, A peak, phase-voltage
amplitude per mechanical rad/s); each field accepts typed units. A value the
core refuses stays as typed, marked, with the reason below it, and the last
good model stays in use.
"""

from __future__ import annotations

import math

from PySide6.QtWidgets import (QCheckBox, QComboBox, QFormLayout, QGroupBox, QLabel, QVBoxLayout,
                               QWidget)

from app.panels.quantity_edit import QuantityEdit, format_number
from app.session import Session
from app.signals import signals_blocked

# (attr, label, si unit, display unit, integer)
MOTOR_ROWS = (
    ("pole_pairs", "Pole pairs", "", "", True),
    ("resistance_ohm", "Resistance (phase)", "ohm", "ohm", False),
    ("inductance_h", "Inductance (phase)", "H", "mH", False),
    ("torque_constant_nm_per_a", "Kt (per A peak)", "N*m/A", "N*m/A", False),
    ("back_emf_v_s_per_rad", "Ke (phase peak)", "V*s/rad", "V*s/rad", False),
    ("inertia_kgm2", "Rotor inertia", "kg*m^2", "kg*cm^2", False),
    ("viscous_friction_nm_s_per_rad", "Viscous friction", "N*m*s/rad", "N*m*s/rad", False),
    ("coulomb_friction_nm", "Coulomb friction", "N*m", "N*m", False),
    ("continuous_current_a", "Continuous current", "A", "A", False),
    ("peak_current_a", "Peak current", "A", "A", False),
    ("max_speed_rad_s", "Max speed", "rad/s", "rpm", False),
)
DRIVE_ROWS = (
    ("bus_voltage_v", "DC bus", "V", "V", False),
    ("max_modulation", "Max modulation", "", "", False),
    ("current_limit_a", "Current limit (peak)", "A", "A", False),
    ("pwm_frequency_hz", "PWM frequency", "Hz", "kHz", False),
    ("current_rate_hz", "Current-loop rate", "Hz", "kHz", False),
    ("speed_rate_hz", "Speed-loop rate", "Hz", "kHz", False),
    ("position_rate_hz", "Position-loop rate", "Hz", "kHz", False),
    ("computation_delay_samples", "Computation delay", "", "", False),
    ("pwm_delay_samples", "PWM delay", "", "", False),
    ("speed_estimate_delay_samples", "Speed-estimate delay", "", "", False),
    ("current_filter_hz", "Current feedback LP", "Hz", "Hz", False),
    ("encoder_counts_per_rev", "Encoder counts/rev", "", "", False),
)


def _load_rows(motion: str):
    linear = motion == "linear"
    j, b, f, k, c = (("kg", "N*s/m", "N", "N/m", "N*s/m") if linear
                     else ("kg*m^2", "N*m*s/rad", "N*m", "N*m/rad", "N*m*s/rad"))
    rows = [("gear_ratio", "Gear ratio", "", "", False)]
    if linear:
        rows.append(("lead_m", "Lead per output turn", "m", "mm", False))
    rows += [
        ("inertia", "Moving mass" if linear else "Load inertia", j, j if linear else "kg*cm^2", False),
        ("viscous_friction", "Viscous friction", b, b, False),
        ("coulomb_friction", "Coulomb friction", f, f, False),
        ("stiffness", "Transmission stiffness", k, k, False),
        ("damping", "Transmission damping", c, c, False),
    ]
    return tuple(rows)


def _hz(f: float) -> str:
    return "—" if not math.isfinite(f) else (f"{f / 1000:.3g} kHz" if f >= 1000 else f"{f:.3g} Hz")


def _s(t: float) -> str:
    if not math.isfinite(t):
        return "—"
    return f"{t * 1e3:.3g} ms" if t < 1 else f"{t:.3g} s"


DERIVED = (
    ("τe = L/R", lambda a: _s(a.electrical_time_constant_s)),
    ("τm = R·J/(Kt·Ke)", lambda a: _s(a.mechanical_time_constant_s)),
    ("Inertia ratio (load : rotor)", lambda a: f"{a.inertia_ratio:.3g} : 1"),
    ("Total inertia at motor", lambda a: f"{a.total_inertia_kgm2 * 1e4:.4g} kg·cm²"),
    ("Resonance", lambda a: _hz(a.resonance_hz)),
    ("Anti-resonance", lambda a: _hz(a.antiresonance_hz)),
    ("Current limit used", lambda a: f"{a.current_limit_a:.3g} A"),
    ("Voltage limit", lambda a: f"{a.drive.voltage_limit_v:.4g} V"),
    ("DC speed gain", lambda a: f"{a.dc_speed_gain_rad_s_per_v * 60 / (2 * math.pi):.4g} rpm/V"),
    ("No-load speed at the limit", lambda a: f"{a.no_load_speed_rad_s * 60 / (2 * math.pi):.4g} rpm"),
)


class _Row:
    """One editable field with its reason label."""

    def __init__(self, part: str, attr: str, label: str, si: str, display: str, integer: bool):
        self.part, self.attr = part, attr
        self.edit = QuantityEdit(f"{part}.{attr}", si, display, integer=integer,
                                 digits=10 if attr == "encoder_counts_per_rev" else 4)
        self.edit.setObjectName(f"axis:{part}.{attr}")
        self.reason = QLabel()
        self.reason.setProperty("role", "reason")
        self.reason.setWordWrap(True)
        self.reason.hide()
        self.edit.invalid_changed.connect(self._show)
        self.label = label

    def _show(self, reason: str) -> None:
        self.reason.setText(reason)
        self.reason.setVisible(bool(reason))


class AxisPanel(QWidget):
    """"Axis model" panel: Motor / Load / Drive groups and the derived quantities."""

    def __init__(self, session: Session, parent: QWidget | None = None):
        super().__init__(parent)
        self.session = session
        self.rows: dict[str, _Row] = {}
        self._shown_axis = None
        self._layout = QVBoxLayout(self)
        self._layout.setContentsMargins(6, 6, 6, 6)
        self._groups: list[QWidget] = []
        self.derived: dict[str, QLabel] = {}
        session.preset_loaded.connect(self.rebuild)
        session.changed.connect(self.refresh)
        self.rebuild()

    def field(self, part: str, attr: str) -> QuantityEdit:
        return self.rows[f"{part}.{attr}"].edit

    def rebuild(self) -> None:
        """Lay the form out for this axis (the load's units follow its motion)."""
        for w in self._groups:
            self._layout.removeWidget(w)
            w.deleteLater()
        self._groups, self.rows = [], {}
        axis = self.session.axis
        motor = QGroupBox(f"Motor — {'PMSM (dq, per phase, A peak)' if axis.motor.kind == 'pmsm' else 'brushed DC'}")
        form = QFormLayout(motor)
        for spec in MOTOR_ROWS:
            if spec[0] == "pole_pairs" and axis.motor.kind == "dc":
                continue
            self._add(form, "motor", *spec)
        load = QGroupBox(f"Load — {axis.load.motion}")
        form = QFormLayout(load)
        self.compliant = QCheckBox("Compliant transmission (two-mass)")
        self.compliant.setObjectName("axis:load.compliant")
        self.compliant.toggled.connect(lambda on: self._set("load", "compliant", bool(on), None))
        form.addRow(self.compliant)
        for spec in _load_rows(axis.load.motion):
            self._add(form, "load", *spec)
        drive = QGroupBox("Drive")
        form = QFormLayout(drive)
        self.modulation = QComboBox()
        self.modulation.addItems(["svpwm", "sinusoidal", "hbridge"])
        self.modulation.setObjectName("axis:drive.modulation")
        self.modulation.currentTextChanged.connect(lambda t: self._set("drive", "modulation", t, None))
        form.addRow("Modulation", self.modulation)
        for spec in DRIVE_ROWS:
            self._add(form, "drive", *spec)
        derived = QGroupBox("Derived (read-only)")
        form = QFormLayout(derived)
        self.derived = {}
        for label, _fn in DERIVED:
            value = QLabel()
            value.setProperty("role", "derived")
            form.addRow(label, value)
            self.derived[label] = value
        for w in (motor, load, drive, derived):
            self._layout.addWidget(w)
            self._groups.append(w)
        self._shown_axis = None
        self.refresh()

    def _add(self, form: QFormLayout, part: str, attr: str, label: str, si: str, display: str, integer: bool):
        row = _Row(part, attr, label, si, display, integer)
        row.edit.value_entered.connect(lambda v, r=row: self._set(r.part, r.attr, v, r))
        form.addRow(label, row.edit)
        form.addRow(row.reason)
        self.rows[f"{part}.{attr}"] = row

    def _set(self, part: str, attr: str, value, row: _Row | None) -> None:
        reason = self.session.set_axis_value(part, attr, value, row.edit.text() if row is not None else None)
        if reason and row is not None:
            row.edit.set_invalid(reason)
        elif reason:
            self.refresh(force=True)

    def refresh(self, force: bool = False) -> None:
        axis = self.session.axis
        if axis is self._shown_axis and not force:
            return
        self._shown_axis = axis
        for row in self.rows.values():
            row.edit.set_value(getattr(getattr(axis, row.part), row.attr))
        with signals_blocked(self.compliant, self.modulation):
            self.compliant.setChecked(axis.load.compliant)
            self.modulation.setCurrentText(axis.drive.modulation)
        for label, fn in DERIVED:
            try:
                text = fn(axis)
            except (ZeroDivisionError, ValueError, OverflowError):
                text = "—"
            self.derived[label].setText(text)


__all__ = ["AxisPanel", "format_number"]
