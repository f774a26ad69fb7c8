"""The area map: the network drawn from its coordinates, panned with one finger, zoomed with two
(or the ZOOM buttons, or a mouse wheel), hydrants picked with a tap.

Geometry is in ``mobile.services.mapdata``; this widget only draws and turns touches into
``on_pick(node_id)`` (a tap near a junction) or ``on_point(x, y)`` (a tap on open map, in map units).
"""

from kivy.core.text import Label as CoreLabel
from kivy.graphics import Color, Ellipse, Line, Mesh, Rectangle
from kivy.graphics.transformation import Matrix
from kivy.metrics import dp
from kivy.properties import ListProperty, ObjectProperty, StringProperty
from kivy.uix.scatter import ScatterPlane
from kivy.uix.stencilview import StencilView

from mobile.widgets import style as S

TAP_SLOP = dp(12)  # a touch that moves less than this is a tap, not a pan
TAP_RADIUS = dp(30)  # a tap this near a junction picks it (a gloved fingertip)


class NetworkMap(StencilView):
    data = ObjectProperty(None, allownone=True)  # mobile.services.mapdata.MapData
    gauges = ListProperty([])
    flows = ListProperty([])
    picked = StringProperty("")
    here = ListProperty([])  # [x, y] in map units, or []
    planned = ListProperty([])  # the day's plan: [{"node", "role", "label", "x", "y"}] (map units)

    __events__ = ("on_pick", "on_point")

    def __init__(self, **kwargs):
        super().__init__(**kwargs)
        self.plane = ScatterPlane(do_rotation=False, scale_min=0.5, scale_max=60.0,
                                  auto_bring_to_front=False)
        self.add_widget(self.plane)
        self.view = None
        for name in ("size", "pos", "data"):
            self.fbind(name, self.fit)
        for name in ("gauges", "flows", "picked", "here", "planned"):
            self.fbind(name, self.draw)
        self.plane.fbind("scale", self.draw)

    # --- drawing --------------------------------------------------------------------------
    def fit(self, *args):
        """Show the whole area (the WHOLE AREA button, and after a resize)."""
        if self.data is None or self.width < 10 or self.height < 10:
            self.plane.canvas.clear()
            return
        self.view = self.data.fit(self.width, self.height, pad=dp(24))
        self.plane.transform = Matrix().translate(self.x, self.y, 0)
        self.draw()

    def zoom(self, factor: float):
        self.plane.apply_transform(Matrix().scale(factor, factor, factor),
                                   anchor=self.plane.to_local(*self.center))

    def draw(self, *args):
        c = self.plane.canvas
        c.clear()
        if self.data is None or self.view is None:
            return
        d, v, k = self.data, self.view, 1.0 / max(self.plane.scale, 1e-6)
        px, py = v.to_px(d.x, d.y)
        with c:
            Color(*S.PAPER)
            Rectangle(pos=(-1e5, -1e5), size=(2e5, 2e5))
            Color(*S.GREY)
            verts, idx = [], []
            for n, (a, b) in enumerate(d.pipes):
                verts += [float(px[a]), float(py[a]), 0, 0, float(px[b]), float(py[b]), 0, 0]
                idx += [2 * n, 2 * n + 1]
            Mesh(vertices=verts, indices=idx, mode="lines")
            r = dp(7) * k
            Color(*S.NAVY)
            for i in range(len(d.ids)):
                if d.hydrant[i]:
                    Ellipse(pos=(px[i] - r, py[i] - r), size=(2 * r, 2 * r))
            self._plan(k)
            self._mark(d, px, py, k)

    def _plan(self, k):
        """The plan's hydrants: a filled square where a test flows, a ring where it gauges, each
        with its test's number beside it (drawn at a fixed size on the screen)."""
        for m in self.planned:
            x, y = self.view.to_px(m["x"], m["y"])
            x, y = float(x), float(y)
            h = dp(9) * k
            Color(*S.PLAN)
            if m["role"] == "flow":
                Rectangle(pos=(x - h, y - h), size=(2 * h, 2 * h))
            else:
                Line(circle=(x, y, dp(11) * k), width=dp(2.5))
            label = CoreLabel(text=m["label"], font_size=S.TEXT * 0.9, bold=True, color=S.PLAN)
            label.refresh()
            tex = label.texture
            w, t = tex.width * k, tex.height * k
            Color(*S.PAPER)  # a white tag behind the number, readable over pipes
            Rectangle(pos=(x + dp(12) * k, y + dp(4) * k), size=(w, t))
            Color(1, 1, 1, 1)
            Rectangle(texture=tex, pos=(x + dp(12) * k, y + dp(4) * k), size=(w, t))

    def _mark(self, d, px, py, k):
        at = {n: i for i, n in enumerate(d.ids)}
        if self.picked in at:
            i, r = at[self.picked], dp(20) * k
            Color(*S.AMBER)
            Ellipse(pos=(px[i] - r, py[i] - r), size=(2 * r, 2 * r))
            Color(*S.INK)
            Line(circle=(px[i], py[i], r), width=dp(1.5))
        for g in self.gauges:  # gauge hydrants: a thick ring
            if g in at:
                i = at[g]
                Color(*S.GREEN)
                Line(circle=(px[i], py[i], dp(15) * k), width=dp(3))
        for f in self.flows:  # flowing hydrants: a thick square
            if f in at:
                i, h = at[f], dp(14) * k
                Color(*S.RED)
                Line(rectangle=(px[i] - h, py[i] - h, 2 * h, 2 * h), width=dp(3))
        if self.here:
            hx, hy = self.view.to_px(*self.here)
            h = dp(16) * k
            Color(*S.INK)
            Line(points=[hx - h, hy, hx + h, hy], width=dp(2))
            Line(points=[hx, hy - h, hx, hy + h], width=dp(2))

    # --- touches --------------------------------------------------------------------------
    def on_touch_down(self, touch):
        if not self.collide_point(*touch.pos):
            return False
        if touch.is_mouse_scrolling:
            factor = 1.25 if touch.button == "scrolldown" else 0.8
            self.plane.apply_transform(Matrix().scale(factor, factor, factor),
                                       anchor=self.plane.to_local(*touch.pos))
            return True
        touch.ud["map_start"] = touch.pos
        return super().on_touch_down(touch)

    def on_touch_up(self, touch):
        start = touch.ud.get("map_start")
        handled = super().on_touch_up(touch)
        if "button" in touch.profile and str(touch.button).startswith("scroll"):
            return handled  # a mouse wheel zooms, it never picks
        if start is None or self.view is None:
            return handled
        if abs(touch.x - start[0]) > TAP_SLOP or abs(touch.y - start[1]) > TAP_SLOP:
            return True
        lx, ly = self.plane.to_local(*touch.pos)
        x, y = self.view.to_map(lx, ly)
        within = TAP_RADIUS / (self.view.scale * self.plane.scale)
        hit = self.data.nearest(x, y, within=within)
        if hit:
            self.dispatch("on_pick", hit)
        else:
            self.dispatch("on_point", x, y)
        return True

    def tap_at_node(self, node_id):
        """Window position of ``node_id`` as drawn now (for tests and the centre-on action)."""
        at = self.data.where(node_id)
        if at is None or self.view is None:
            return None
        lx, ly = self.view.to_px(*at)
        return self.plane.to_parent(float(lx), float(ly))

    def on_pick(self, node_id):
        pass

    def on_point(self, x, y):
        pass
