"""BokehJS from inline resources: nothing fetched, and sent once ahead of the Bench's view."""

from __future__ import annotations

import pytest

from benches import rc_bench


class TestLoader:
    def test_bokehjs_is_inline(self):
        from bokeh import __version__

        from firstorder.widgets._loader import loader_script

        script = loader_script()
        # The library text itself travels with the page: nothing to fetch.
        assert "cdn.bokeh.org" not in script
        assert f"firstorder-bokehjs-{__version__}" in script
        assert len(script) > 1_000_000  # bokeh, widgets and tables, minified

    def test_display_sends_bokehjs_then_a_short_note(self):
        from IPython.core.interactiveshell import InteractiveShell
        from IPython.utils.capture import capture_output

        InteractiveShell.instance()
        bench = rc_bench()
        with capture_output() as captured:
            bundle = bench._repr_mimebundle_()
        assert "application/vnd.jupyter.widget-view+json" in bundle
        kinds = [list(output.data) for output in captured.outputs]
        assert "application/vnd.bokehjs_load.v0+json" in kinds[0]
        assert captured.outputs[-1].data["text/plain"].startswith("BokehJS")

    @pytest.mark.parametrize("variable", ["VOILA_PREHEAT", "VOILA_KERNEL_ID"])
    def test_in_voila_bokehjs_goes_as_javascript_and_stays(self, monkeypatch, variable):
        # Voilà runs the cell to its end before the page sees an output: a note replacing the
        # loader would be all that arrived, and its page renders no jupyter_bokeh loader type.
        from IPython.core.interactiveshell import InteractiveShell
        from IPython.utils.capture import capture_output

        InteractiveShell.instance()
        monkeypatch.setenv(variable, "False" if variable == "VOILA_PREHEAT" else "0b1c")
        bench = rc_bench()
        with capture_output() as captured:
            bench._publish_bokehjs()
        assert [list(output.data) for output in captured.outputs] == [["application/javascript", "text/plain"]]
        assert "firstorder-bokehjs-" in captured.outputs[0].data["application/javascript"]
