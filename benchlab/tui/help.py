"""The help screen: every key, from the app's own bindings (so it can never list a key that does nothing)."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Static

INTRO = """[b]benchlab: keys[/b]   (press Esc, q or F10 to close)

Views are F1 to F7. Single-letter keys work when no text field has the cursor: press Tab to
leave a field. Ctrl+K aborts from every view, even while typing: the sweep stops and every
output is switched off at once. Quitting (Ctrl+Q or Ctrl+C), SIGTERM and a closed terminal
also switch every output off.

Caution: a swept part and its heat sink can get hot enough to burn, and the fixture carries the
supply's voltage; switch the output off before touching or changing a part (hands-free keeps a
1 mA probe on the fixture between parts). The Thermal view (F7) heats the fixture block and the part
well above room temperature: let both cool before touching them. Follow local electrical codes for
anything mains-powered.
"""


class HelpScreen(ModalScreen):
    BINDINGS = [Binding("escape,q,f10", "dismiss", "Close")]

    def __init__(self, bindings: list[Binding]):
        super().__init__()
        self.keys = bindings

    def compose(self) -> ComposeResult:
        rows = [INTRO]
        for binding in self.keys:
            keys = ", ".join(k.strip().replace("question_mark", "?") for k in binding.key.split(","))
            rows.append(f"  {keys:<22} {binding.description}")
        with VerticalScroll(id="help-box"):
            yield Static("\n".join(rows), id="help-text")
