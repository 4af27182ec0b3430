"""Controls generated from the declarations: one per plan address, ``.value`` in SI units.

A :class:`QuantityControl` is made from a :class:`~ampplan.stages.Parameter` (unit, bounds, log or
linear scale, optional "not fitted"): a slider that moves with the keyboard's arrow keys (on a log
scale one step is a 24th of a decade, the spacing of the E24 series), a text field that reads
engineering notation (``4.7k``, ``4.7 kΩ``, ``100u``), a "fitted" box when the parameter is
optional, and a message line. Its ``value`` trait is the SI value the plan holds; setting it (from
the slider, the text, or code) asks the live plan to take it. A refused value puts the message
next to the control and the control back to the last good value.

A :class:`ChoiceControl` offers words (a coupling, a device preset by role).
"""

from __future__ import annotations

import html
import math
from typing import Callable

import ipywidgets as widgets
import traitlets

from ..errors import AmpplanError
from ..stages import Parameter
from ..units import format_quantity, parse_quantity

__all__ = ["QuantityControl", "ChoiceControl", "slider_range", "css_name", "LOG_STEP", "shared_layout",
           "shared_style"]

#: Slider step on a log scale, decades: one 24th, the spacing of the E24 series (IEC 60063).
LOG_STEP = 1.0 / 24.0
#: Linear sliders have this many steps over their range.
LINEAR_STEPS = 200
#: A log slider spans this ratio either side of the value it starts from, when the declaration
#: gives no typical range.
LOG_SPAN = 30.0
#: Where a value starts from when the declaration has no default and the plan holds none.
_FALLBACK_CENTRE = {"Ω": 10e3, "F": 10e-6, "V": 1.0, "A": 1e-3, "W": 0.5, "": 100.0, "°C": 25.0}

#: A slider value within this relative distance of the control's value is an echo of it.
_ECHO = 1e-9

#: Words accepted in a text field for "not fitted".
NONE_WORDS = ("none", "not fitted", "-", "")


def css_name(address: str) -> str:
    """``"s1.rc"`` → ``"s1-rc"`` (for the CSS class ``ampplan-control-s1-rc``)."""
    return address.replace(".", "-")


def _named(address: str, exc: Exception) -> str:
    """The refusal's message, led by the plan address when it does not already say it."""
    message = str(exc)
    return message if message.startswith(address) else f"{address}: {message}"


def slider_range(parameter: Parameter, value: float | None, typical=None) -> tuple[float, float]:
    """(low, high) for a control's slider, SI units.

    ``typical`` when given, else ``parameter.typical`` when the declaration has one; otherwise derived from the value (or the
    default): a factor of :data:`LOG_SPAN` either side on a log scale, twice the value's size
    (at least 10 units) either side on a linear one; clipped to the bounds and stretched to hold
    ``value``.
    """
    typical = typical if typical is not None else getattr(parameter, "typical", None)
    centre = value if value is not None else parameter.default
    if centre is None or not math.isfinite(centre):
        centre = _FALLBACK_CENTRE.get(parameter.unit, 1.0)
    if typical is not None:
        low, high = (float(x) for x in typical)
    elif parameter.scale == "log":
        low, high = centre / LOG_SPAN, centre * LOG_SPAN
    else:
        half = 2.0 * max(abs(centre), 10.0)
        low, high = centre - half, centre + half
    low = max(low, parameter.minimum)
    high = min(high, parameter.maximum)
    if parameter.scale == "log":
        low = max(low, high * 1e-6, 1e-300) if low <= 0 else low
    if value is not None and math.isfinite(value):
        low, high = min(low, value), max(high, value)
    if not high > low:
        high = low + (abs(low) or 1.0)
    return float(low), float(high)


_SHARED: dict = {}


def shared_layout(**properties) -> widgets.Layout:
    """One ``Layout`` per set of properties, shared by every control that uses it.

    ipywidgets lets widgets share a layout (and a style); each one is a model saved in the
    notebook's widget state (about 1 kB each), and a plan's editors have hundreds of parts.
    Never change a shared layout in place: give the widget another one.
    """
    key = ("layout", tuple(sorted(properties.items())))
    if key not in _SHARED:
        _SHARED[key] = widgets.Layout(**properties)
    return _SHARED[key]


def shared_style(kind: type):
    """One default style for widgets of ``kind`` (``widgets.HTML``, ...), shared like
    :func:`shared_layout`."""
    key = ("style", kind)
    if key not in _SHARED:
        _SHARED[key] = kind().style
    return _SHARED[key]


class _ValueLast:
    """A slider whose state messages carry ``value`` after ``min``, ``max`` and ``step``.

    The front end applies a message's keys in order; a new value applied before its new range
    would be snapped to the old grid.
    """

    def send_state(self, key=None):
        if key is not None and not isinstance(key, str):
            key = sorted(key, key=lambda k: k == "value")
        super().send_state(key)


class _LogSlider(_ValueLast, widgets.FloatLogSlider):
    pass


class _LinearSlider(_ValueLast, widgets.FloatSlider):
    pass


class QuantityControl(widgets.HBox):
    """A control for one number at a plan address (see the module docstring).

    Parameters
    ----------
    address : str
        Plan address (``"s1.rc"``).
    parameter : Parameter
        Its declaration (unit, bounds, scale, optional, help).
    value : float or None
        The value the plan holds now, SI units.
    accept : callable
        ``accept(address, value)`` applies a value to the live plan; it raises AmpplanError when
        the value is refused.
    label : str, optional
        Text before the control (default: the address).
    typical : (float, float), optional
        The slider's range, when the declaration has no ``typical`` of its own.
    """

    value = traitlets.Float(allow_none=True)

    def __init__(self, address: str, parameter: Parameter, value, accept: Callable, label: str | None = None,
                 typical=None):
        self.address = address
        self.parameter = parameter
        self._accept = accept
        self._quiet = False
        self._last_good = value
        low, high = slider_range(parameter, value, typical)
        start = value if value is not None else parameter.default
        if start is None or not math.isfinite(start):
            start = math.sqrt(low * high) if parameter.scale == "log" else (low + high) / 2
        # continuous_update=False: the slider sends a value when the designer moves it (each key
        # press, the end of a drag), never in answer to a value the kernel sent it. With True,
        # ipywidgets' log slider sends back every value it is given, snapped to the grid it has
        # at that moment, and such an echo can arrive after later edits (when cells run ahead of
        # widget messages) and undo them.
        common = dict(readout=False, continuous_update=False, layout=shared_layout(width="210px"),
                      style=shared_style(widgets.FloatLogSlider))
        if parameter.scale == "log":
            self.slider = _LogSlider(value=start, base=10.0, min=math.log10(low), max=math.log10(high),
                                                 step=LOG_STEP, **common)
        else:
            self.slider = _LinearSlider(value=start, min=low, max=high, step=(high - low) / LINEAR_STEPS,
                                              **common)
        self.text = widgets.Text(value=self._shown(value), continuous_update=False,
                                 layout=shared_layout(width="110px"), style=shared_style(widgets.Text))
        self.text.add_class("ampplan-control-text")
        self.fitted = widgets.Checkbox(value=value is not None, indent=False, description="fitted",
                                       layout=shared_layout(width="72px"), style=shared_style(widgets.Checkbox))
        self.label = widgets.HTML(f"<span title='{html.escape(parameter.help)}'>{html.escape(label or address)}"
                                  f"</span>", layout=shared_layout(width="150px"),
                                  style=shared_style(widgets.HTML))
        self.message = widgets.HTML("", layout=shared_layout(width="auto"), style=shared_style(widgets.HTML))
        self.message.add_class("ampplan-control-message")
        children = [self.label, self.slider, self.text]
        if parameter.optional:
            children.append(self.fitted)
        children.append(self.message)
        super().__init__(children=children, value=value, layout=shared_layout())
        self.add_class("ampplan-control")
        self.add_class(f"ampplan-control-{css_name(address)}")
        self.slider.disabled = value is None
        self._anchor(start)
        self.slider.observe(self._from_slider, names="value")
        self.text.observe(self._from_text, names="value")
        self.fitted.observe(self._from_fitted, names="value")
        self.observe(self._from_value, names="value")

    # -- what the designer does -------------------------------------------------------------
    def _from_slider(self, change):
        if self._quiet or not self.fitted.value:
            return
        new, current = float(change["new"]), self.value
        if current is not None and abs(new - current) <= _ECHO * abs(current):
            return  # the front end's own rounding of the value it was sent, not a move
        if current is not None and self._snapped_echo(new, current):
            # The front end snapped the value it was sent to the grid it still had (a value set
            # from code arrives with its new grid, and the slider may apply the value first) and
            # sent that back. Not a move: put the slider back on the plan's value.
            self._show(current)
            return
        self.value = new

    def _snapped_echo(self, new: float, current: float) -> bool:
        """True when ``new`` is less than half a slider step from ``current``.

        A move of the slider (a key press, a drag) lands on the slider's grid, which passes
        through the plan's value: it is a whole number of steps away. Only the front end's
        snapping of a value to a grid laid for another value lands closer than half a step.
        """
        if isinstance(self.slider, widgets.FloatLogSlider):
            if new <= 0 or current <= 0:
                return False
            distance = abs(math.log10(new) - math.log10(current))
        else:
            distance = abs(new - current)
        return distance < 0.5 * self.slider.step * (1 - 1e-6)

    def _from_text(self, change):
        if self._quiet:
            return
        text = change["new"].strip()
        try:
            if text.lower() in NONE_WORDS and self.parameter.optional:
                value = None
            else:
                value = parse_quantity(text, self.parameter.unit)
        except AmpplanError as exc:
            self._refused(f"{self.address}: {exc}")
            return
        if value == self.value:  # same number written another way: tidy the text only
            self._show(value)
            return
        self.value = value

    def _from_fitted(self, change):
        if self._quiet:
            return
        self.value = float(self.slider.value) if change["new"] else None

    def _from_value(self, change):
        if self._quiet:
            return
        new = change["new"]
        try:
            self._accept(self.address, new)
        except AmpplanError as exc:
            self._refused(_named(self.address, exc))
            return
        except Exception as exc:  # noqa: BLE001 - shown next to the control, never only in a log
            self._refused(f"{self.address}: {type(exc).__name__}: {exc}")
            return
        self._last_good = new
        self.message.value = ""
        self._show(new)

    # -- display ----------------------------------------------------------------------------
    def _refused(self, message: str):
        """Show ``message`` next to the control and put it back to the last good value."""
        self.message.value = f"<span class='ampplan-refused' style='color:#a01a1a'>⚠ {html.escape(message)}</span>"
        self._show(self._last_good)

    def _shown(self, value) -> str:
        return "not fitted" if value is None else format_quantity(value, self.parameter.unit)

    def _show(self, value):
        """Show ``value`` on every part without asking the plan for anything."""
        self._quiet = True
        try:
            self.value = value
            self.text.value = self._shown(value)
            self.fitted.value = value is not None
            self.slider.disabled = value is None
            if value is not None:
                self._anchor(value)
        finally:
            self._quiet = False

    def _anchor(self, value: float):
        """Put ``value`` on the slider's step grid, keeping (or stretching) its range.

        A slider's front end snaps its value to ``min + k·step`` and sends the snapped value back;
        a grid that does not pass through the plan's value would then change the design merely by
        showing it. So the grid is laid from the value itself, whole steps either side.
        """
        slider = self.slider
        log = isinstance(slider, widgets.FloatLogSlider)
        if log and value <= 0:
            return
        here = math.log10(value) if log else value
        step = slider.step
        low, high = min(slider.min, here), max(slider.max, here)
        start = here - math.floor((here - low) / step + 1e-9) * step
        end = here + math.floor((high - here) / step + 1e-9) * step
        with slider.hold_sync():
            # min and max first, in whichever order keeps min <= max on the way.
            if start > slider.max:
                slider.max, slider.min = end, start
            else:
                slider.min, slider.max = start, end
            slider.value = value

    def sync(self, value) -> None:
        """Follow the plan (after an edit elsewhere, an undo): show ``value`` as the last good one."""
        self._last_good = value
        if value != self.value or self.text.value != self._shown(value):
            self._show(value)

    def clear_message(self) -> None:
        self.message.value = ""


class ChoiceControl(widgets.HBox):
    """A control for a word at a plan address (a coupling, a device preset by role).

    Parameters
    ----------
    address : str
    options : sequence of str
    value : str
    accept : callable
        ``accept(address, word)``; raises AmpplanError when refused.
    label : str
    """

    value = traitlets.Unicode()

    def __init__(self, address: str, options, value: str, accept: Callable, label: str):
        self.address = address
        self._accept = accept
        self._quiet = False
        self._last_good = value
        self.dropdown = widgets.Dropdown(options=list(options), value=value, layout=shared_layout(width="320px"))
        self.label = widgets.HTML(html.escape(label), layout=shared_layout(width="150px"),
                                  style=shared_style(widgets.HTML))
        self.message = widgets.HTML("", layout=shared_layout(), style=shared_style(widgets.HTML))
        self.message.add_class("ampplan-control-message")
        super().__init__(children=[self.label, self.dropdown, self.message], value=value, layout=shared_layout())
        self.add_class("ampplan-control")
        self.add_class(f"ampplan-control-{css_name(address)}")
        self.dropdown.observe(self._from_dropdown, names="value")
        self.observe(self._from_value, names="value")

    def _from_dropdown(self, change):
        if not self._quiet:
            self.value = change["new"]

    def _from_value(self, change):
        if self._quiet:
            return
        try:
            self._accept(self.address, change["new"])
        except AmpplanError as exc:
            self._refused(_named(self.address, exc))
            return
        except Exception as exc:  # noqa: BLE001 - shown next to the control, never only in a log
            self._refused(f"{self.address}: {type(exc).__name__}: {exc}")
            return
        self._last_good = change["new"]
        self.message.value = ""
        self._show(change["new"])

    def _refused(self, message: str):
        self.message.value = f"<span class='ampplan-refused' style='color:#a01a1a'>⚠ {html.escape(message)}</span>"
        self._show(self._last_good)

    def _show(self, value):
        self._quiet = True
        try:
            if value not in self.dropdown.options:
                self.dropdown.options = [*self.dropdown.options, value]
            self.value = value
            self.dropdown.value = value
        finally:
            self._quiet = False

    def sync(self, value) -> None:
        self._last_good = value
        if value != self.value:
            self._show(value)

    def clear_message(self) -> None:
        self.message.value = ""
