"""Page helpers of the workbench: Ctrl+Z and Ctrl+Shift+Z, and scrolling a refusal into view.

A tiny widget (anywidget) listens for those two keys only, and only while
the focus is inside the workbench (or, with nothing focused, the pointer is
over it); text fields keep their own undo. Every other key passes untouched.
On request it scrolls an element of the workbench (a refusal) into view.
"""

from __future__ import annotations

from collections.abc import Callable

import anywidget

_ESM = """
function render({ model, el }) {
  el.style.display = 'none';
  const handler = (event) => {
    if (!(event.ctrlKey || event.metaKey) || String(event.key).toLowerCase() !== 'z') return;
    const root = el.closest('.sk-workbench');
    if (!root) return;
    const target = event.target;
    const inside = target instanceof Node && root.contains(target);
    const idle = target === document.body && root.matches(':hover');
    if (!inside && !idle) return;
    const tag = String(target.tagName || '').toUpperCase();
    if (tag === 'INPUT' || tag === 'TEXTAREA' || tag === 'SELECT' || target.isContentEditable)
      return;
    event.preventDefault();
    event.stopPropagation();
    model.send({ action: event.shiftKey ? 'redo' : 'undo' });
  };
  document.addEventListener('keydown', handler, true);
  const reveal = (msg) => {
    if (!msg || typeof msg.reveal !== 'string') return;
    const root = el.closest('.sk-workbench');
    const target = root && root.querySelector('.' + msg.reveal);
    if (target) requestAnimationFrame(() => requestAnimationFrame(
      () => target.scrollIntoView({block: 'nearest', inline: 'nearest'})));
  };
  model.on('msg:custom', reveal);
  return () => {
    document.removeEventListener('keydown', handler, true);
    model.off('msg:custom', reveal);
  };
}
export default { render };
"""


class UndoKeys(anywidget.AnyWidget):
    """Calls ``on_undo`` on Ctrl+Z and ``on_redo`` on Ctrl+Shift+Z inside the workbench.

    Parameters
    ----------
    on_undo, on_redo : callable
        Called without arguments.
    """

    _esm = _ESM

    def __init__(self, on_undo: Callable[[], None], on_redo: Callable[[], None]) -> None:
        super().__init__()
        self._on_undo = on_undo
        self._on_redo = on_redo
        self.on_msg(self._message)

    def reveal(self, css_class: str) -> None:
        """Scroll the workbench element with this CSS class into view (when shown in a page)."""
        self.send({"reveal": css_class})

    def _message(self, _widget, content: dict, _buffers) -> None:
        action = content.get("action") if isinstance(content, dict) else None
        if action == "undo":
            self._on_undo()
        elif action == "redo":
            self._on_redo()
