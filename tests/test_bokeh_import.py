"""The workbook kernel imports bokeh's models without their documentation step
(studykit.app.bokeh_assets.import_bokeh_models): the models BokehJS sees are the same.

Reference: bokeh itself, imported the plain way in another process: the same registered
models with the same names for BokehJS, and the same document JSON for a chart built the same
way (bokeh numbers its objects in creation order, so the two documents match byte for byte).
"""

from __future__ import annotations

import json
import subprocess
import sys

CODE = """
import json, sys
if sys.argv[1] == "lean":
    from studykit.app.bokeh_assets import import_bokeh_models
    lean = import_bokeh_models()
else:
    import bokeh.models, bokeh.plotting
    lean = False
from bokeh.model import Model
from bokeh.core.has_props import HasProps
from bokeh.embed import json_item
from bokeh.plotting import figure
from bokeh.models import ColumnDataSource, HoverTool
names = sorted(
    (k, v.__view_model__, v.__view_module__, v.__qualified_model__)
    for k, v in HasProps.model_class_reverse_map.items()
)
src = ColumnDataSource({"x": [1, 2, 3], "y": [0.5, 0.25, 0.75]})
p = figure(height=200, title="t", x_range=(0, 4))
p.scatter("x", "y", source=src, size=8)
p.add_tools(HoverTool(tooltips=[("y", "@y")]))
doc = json_item(p, "target")
from bokeh.models import Scatter
step = Model.__dict__["__init_subclass__"].__func__.__code__.co_names  # bokeh's own again
print(json.dumps({"lean": lean, "names": names, "doc": doc,
                  "signature": "__signature__" in vars(Scatter.__init__),
                  "restored": "process_example" in step}))
"""


def _run(mode: str) -> dict:
    done = subprocess.run(
        [sys.executable, "-c", CODE, mode], capture_output=True, text=True, check=True
    )
    return json.loads(done.stdout.strip().splitlines()[-1])


def test_models_for_bokehjs_unchanged():
    lean, plain = _run("lean"), _run("plain")
    assert lean["lean"] is True and plain["lean"] is False
    assert len(plain["names"]) > 300
    assert lean["names"] == plain["names"]
    assert json.dumps(lean["doc"], sort_keys=True) == json.dumps(plain["doc"], sort_keys=True)
    # the documentation step was left out, and bokeh's own step is back for later classes
    assert (lean["signature"], plain["signature"]) == (False, True)
    assert lean["restored"] and plain["restored"]


def test_plain_import_when_imported_already():
    code = (
        "import bokeh.models\n"
        "from studykit.app.bokeh_assets import import_bokeh_models\n"
        "print(import_bokeh_models())\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert done.stdout.strip() == "False"
