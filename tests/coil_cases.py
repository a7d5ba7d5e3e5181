"""Case text shared by the study tests (check, parallel, cluster, tolerance): a 24 V, 100 mH,
30 Ω coil with a constant-drop diode (0.7 V) in series with a 20 V Zener across it (invented
demo values), and its [tolerance] tables.

With an ideal switch the switch node sits at V_supply + V_Z + V_F = 44.7 V while the clamp
conducts (the flyback clamp of any power-electronics textbook, e.g. Mohan, Undeland, Robbins,
"Power Electronics", ch. on snubbers/clamps).
"""

from __future__ import annotations

from concurrent.futures import Executor, Future

V_SUPPLY, V_Z, V_F = 24.0, 20.0, 0.7
PEAK = V_SUPPLY + V_Z + V_F  # closed form, 44.7 V

#: the switch of :func:`diode_zener_case` when it is not ideal (invented demo values)
MOSFET = 'type = "mosfet"\non_resistance = "0.1 Ω"\nbreakdown_voltage = "60 V"'


def diode_zener_case(title: str, limit: float, *, switch: str = 'type = "ideal"') -> str:
    """The case file text: ``title`` (marked demo data), the ``[switch]`` table's lines and
    ``max_peak_voltage = limit`` volts."""
    return f'''title = "{title} (demo data)"
[supply]
voltage = "24 V"
[coil]
inductance = "100 mH"
resistance = "30 Ω"
[switch]
{switch}
[[clamp]]
across = "coil"
[[clamp.element]]
type = "diode"
model = "constant-drop"
forward_voltage = "0.7 V"
[[clamp.element]]
type = "zener"
voltage = "20 V"
[checks]
max_peak_voltage = "{limit:g} V"
'''


def tolerance(path: str, **fields: str) -> str:
    """One [tolerance] table: ``tolerance("coil.inductance", band="10 %")``; the coil
    temperature's key is written bare, the others quoted."""
    head = path if path == "coil_temperature" else f'"{path}"'
    return f"[tolerance.{head}]\n" + "".join(f'{key} = "{value}"\n' for key, value in fields.items())


#: the coil temperature's band used by the tests (IEC 60028 scales the copper resistance)
TEMPERATURE = tolerance("coil_temperature", min="-20 °C", max="85 °C")
#: the Zener voltage ±1 V
ZENER_1V = tolerance("clamp[0].element[1].voltage", band="±1 V")


def two_band_study(title: str) -> str:
    """The diode + Zener case with L (10 %, uniform) and the supply (5 %, normal) toleranced, the
    Zener's 1 V band and the coil temperature: a small tolerance study for executor tests."""
    return (diode_zener_case(title, 45)
            + tolerance("coil.inductance", band="10 %", distribution="uniform")
            + tolerance("supply.voltage", band="5 %", distribution="normal") + ZENER_1V + TEMPERATURE)


class InProcess(Executor):
    """A concurrent.futures executor that runs each task at once in this thread (the Executor
    interface of the Python documentation, nothing more)."""

    def __init__(self):
        self.tasks = 0

    def submit(self, fn, /, *args, **kwargs):
        fut = Future()
        self.tasks += 1
        try:
            fut.set_result(fn(*args, **kwargs))
        except BaseException as err:  # handed to the caller through the future
            fut.set_exception(err)
        return fut
