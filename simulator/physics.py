"""Lumped heat flow in a small electric oven: chamber, lining, casing, and a steel plate.

The network is a tree of heat capacities (nodes) joined by conductances:

    room <- leak gaps, open door --- CHAMBER <- heater
                                      |    \\
              lining node 1 ... casing node -> room        plate surface ... plate core
              (1-D conduction, area grows outwards)         (1-D conduction, half-thickness)

The chamber node holds the air, hearth, elements and the inner skin of the lining. The
plate is heated from both faces by radiation from the chamber (a small grey body in a large
enclosure: q = eps * sigma * (Tc^4 - Ts^4)) and by convection from the chamber air.

A foil-wrapped plate has one more node at the head of its chain: the foil skin (0.05 mm of
stainless), heated by the chamber as above but with the foil's emissivity, and joined to the
plate's surface across the air gap by conduction through still air (k/gap; too thin a gap
for convection to start) plus radiation between two parallel grey faces,
sigma*(T1^4 - T2^4)/(1/eps1 + 1/eps2 - 1) (Incropera Eq. 13.24), linearised per step.

Each step is backward (implicit) Euler with the radiation terms linearised about the start
of the step (h_rad = eps*sigma*(T1^2 + T2^2)(T1 + T2)): unconditionally stable, so a 1 s step
is fine even for a thin plate, and energy is conserved exactly by the discrete scheme.
The tree is solved in O(nodes) by eliminating each chain from its far end towards the
chamber. Plain floats and lists: numpy per step would be slower for ten nodes.

Everything here is SI: kelvin, watts, joules, metres, seconds.
"""

from __future__ import annotations

from tuikiln.simulator.config import LoadConfig, OvenConfig

# Stefan-Boltzmann constant, W/(m^2 K^4): CODATA 2018 (exact since the 2019 SI redefinition).
SIGMA = 5.670374419e-8
KELVIN = 273.15
# Hot air spilling out of the top of an open door and room air running in at the bottom:
# about 3 g/s through a 0.03 m2 opening at ~0.7 m/s (a rough estimate, not a measurement),
# times cp ~1150 J/(kg K), is ~130 W/(m2 K) of opening.
DOOR_CONVECTION_W_M2K = 130.0
# While the door is open the chamber thermocouple sits in a mix of hot and room air: it
# sees this share of the chamber-room difference less (invented, order of size).
DOOR_AIR_MIX = 0.25
# Stainless tool-wrap foil is 0.002 in (0.05 mm) thick: common practice, no source. Its heat
# capacity per area, rho*c*thickness = 7900 * 500 * 5e-5 (from memory, Incropera Table A.1).
FOIL_HEAT_CAPACITY_J_M2K = 7900.0 * 500.0 * 0.05e-3


def air_conductivity_w_mk(temp_k: float) -> float:
    """Still air at 1 atm: k = 0.0263 * (T/300)^0.8 W/(m K), a power-law fit to Incropera
    Table A.4 (from memory: 0.0263 at 300 K, 0.0573 at 800 K, 0.0763 at 1200 K; the fit is
    within 5 % over 300-1300 K)."""
    return 0.0263 * (max(temp_k, 200.0) / 300.0) ** 0.8


class Chain:
    """Nodes in a row hanging off the chamber: node 0 touches the chamber, the last node
    may touch the room through `end_g`.

    Elimination coefficients of nodes 1.. depend only on the step length and `end_g`, so
    they are cached; only node 0 (whose conductance to the chamber carries radiation)
    is recomputed every step.
    """

    __slots__ = ("cap", "g", "temps", "attach_g", "end_g", "p", "q", "_key", "_ch", "_inv_d",
                 "_n")

    def __init__(self, capacities: list[float], inner_g: list[float], temp_k: float) -> None:
        self.cap = capacities
        self.g = inner_g  # g[i] joins node i and node i+1
        self.temps = [temp_k] * len(capacities)
        self.attach_g = 0.0
        self.end_g = 0.0
        n = self._n = len(capacities)
        self.p = [0.0] * n
        self.q = [0.0] * n
        self._ch = [0.0] * n
        self._inv_d = [0.0] * n
        self._key = (-1.0, -1.0)

    def invalidate(self) -> None:
        """The inner conductances changed: compute the elimination again next step."""
        self._key = (-1.0, -1.0)

    def _prepare(self, inv_h: float) -> None:
        cap, g, q, ch, inv_d = self.cap, self.g, self.q, self._ch, self._inv_d
        last = self._n - 1
        for i in range(self._n):
            ch[i] = cap[i] * inv_h
        if last > 0:
            d = ch[last] + g[last - 1] + self.end_g
            inv_d[last] = 1.0 / d
            q[last] = g[last - 1] / d
            for i in range(last - 1, 0, -1):
                d = ch[i] + g[i - 1] + g[i] * (1.0 - q[i + 1])
                inv_d[i] = 1.0 / d
                q[i] = g[i - 1] / d
        self._key = (inv_h, self.end_g)

    def eliminate(self, inv_h: float, room_k: float) -> tuple[float, float]:
        """Eliminate the chain: node 0's new temperature is p0 + q0 * T_chamber_new."""
        if self._key[0] != inv_h or self._key[1] != self.end_g:
            self._prepare(inv_h)
        g, temps, p, q, ch, inv_d = self.g, self.temps, self.p, self.q, self._ch, self._inv_d
        last = self._n - 1
        if last == 0:
            d = ch[0] + self.attach_g + self.end_g
            p0 = (ch[0] * temps[0] + self.end_g * room_k) / d
            q0 = self.attach_g / d
        else:
            right = (ch[last] * temps[last] + self.end_g * room_k) * inv_d[last]
            p[last] = right
            for i in range(last - 1, 0, -1):
                right = (ch[i] * temps[i] + g[i] * right) * inv_d[i]
                p[i] = right
            d = ch[0] + self.attach_g + g[0] * (1.0 - q[1])
            p0 = (ch[0] * temps[0] + g[0] * right) / d
            q0 = self.attach_g / d
        p[0] = p0
        q[0] = q0
        return p0, q0

    def substitute(self, chamber_k: float) -> None:
        temps, p, q = self.temps, self.p, self.q
        t = chamber_k
        for i in range(self._n):
            t = p[i] + q[i] * t
            temps[i] = t


class OvenPhysics:
    """The heat network. `step(h, heater_w)` moves it on by h seconds."""

    def __init__(self, oven: OvenConfig, load: LoadConfig | None, room_c: float) -> None:
        self.room_k = room_c + KELVIN
        volume = oven.chamber_litres / 1000.0
        side = volume ** (1.0 / 3.0)
        self.chamber_area_m2 = 6.0 * side * side
        self.door_area_m2 = oven.door_area_m2 or side * side
        self.leak_area_m2 = oven.leak_area_m2
        self.chamber_cap = oven.chamber_heat_capacity_j_k
        self.chamber_k = self.room_k
        self.chamber_fixed_k: float | None = None
        """Tests pin the chamber at a temperature (a large enclosure) by setting this."""
        self.wall = self._lining(oven, side)
        self.casing_area_m2 = 6.0 * (side + 2.0 * oven.wall_thickness_m) ** 2
        self.casing_h = oven.casing_h_w_m2k
        self.casing_eps = oven.casing_emissivity
        self.foil = False
        self.load_surface_index = 0
        self.load = self._plate(load) if load is not None else None
        self.load_cfg = load
        self.door_open = False
        self._casing_linearised_k = -1.0
        self.energy_in_j = 0.0
        self.energy_lost_j = 0.0
        self.loss_w = 0.0

    def _lining(self, oven: OvenConfig, side: float) -> Chain:
        n = oven.wall_layers
        thick = oven.wall_thickness_m
        dx = thick / (n - 1)
        rho_c = oven.wall_density_kg_m3 * oven.wall_specific_heat_j_kgk

        def area(x: float) -> float:
            return 6.0 * (side + 2.0 * x) ** 2

        caps = []
        for j in range(n):
            lo, hi = max(0.0, (j - 0.5) * dx), min(thick, (j + 0.5) * dx)
            caps.append(rho_c * area(0.5 * (lo + hi)) * (hi - lo))
        self.chamber_cap_total = self.chamber_cap + caps[0]
        g = [oven.wall_conductivity_w_mk * area((j + 0.5) * dx) / dx for j in range(n - 1)]
        # Node 0 of the lining is the chamber's inner skin, merged into the chamber node.
        chain = Chain(caps[1:], g[1:], self.room_k)
        chain.attach_g = g[0]
        return chain

    def _plate(self, load: LoadConfig) -> Chain:
        # Half of a symmetric plate: heated on one face (plus half the edges), insulated at
        # the mid-plane. Lumped (layers = 1) gives tau = rho*c*V/(h*A) for the whole plate.
        face = load.width_m * load.length_m
        edges = 2.0 * (load.width_m + load.length_m) * load.thickness_m
        self.load_area_m2 = 2.0 * face + edges
        self.load_volume_m3 = face * load.thickness_m
        half = 0.5 * load.thickness_m
        rho_c = load.density_kg_m3 * load.specific_heat_j_kgk
        n = load.layers
        if n == 1:
            caps = [rho_c * face * half]
            g: list[float] = []
        else:
            dx = half / (n - 1)
            caps = [rho_c * face * dx * (0.5 if i in (0, n - 1) else 1.0) for i in range(n)]
            g = [load.conductivity_w_mk * face / dx] * (n - 1)
        self.load_exchange_m2 = 0.5 * self.load_area_m2
        self.load_h = load.h_w_m2k
        self.load_eps = load.emissivity
        self.foil = load.wrap == "foil"
        self.load_surface_index = 0
        """Where the plate's surface is in the chain (1 when the foil is node 0)."""
        if self.foil:
            # The foil covers the whole half-plate, edges included; the gap conductance g[0]
            # is renewed every step (it carries radiation).
            caps = [FOIL_HEAT_CAPACITY_J_M2K * self.load_exchange_m2, *caps]
            g = [0.0, *g]
            self.load_eps = load.foil_emissivity
            self.load_surface_index = 1
            eps_f, eps_p = load.foil_emissivity, load.emissivity
            self.gap_eps = (1.0 / (1.0 / eps_f + 1.0 / eps_p - 1.0)
                            if eps_f > 0.0 and eps_p > 0.0 else 0.0)
            self.gap_m = load.foil_gap_m
        return Chain(caps, g, self.room_k)

    def _gap_g(self, foil_k: float, plate_k: float) -> float:
        """Conductance from the foil to the plate surface across the air gap, W/K."""
        air = air_conductivity_w_mk(0.5 * (foil_k + plate_k)) / self.gap_m
        rad = self.gap_eps * SIGMA * (foil_k * foil_k + plate_k * plate_k) * (foil_k + plate_k)
        return self.load_exchange_m2 * (air + rad)

    def step(self, h: float, heater_w: float) -> None:
        """Advance h seconds with the heater delivering `heater_w` on average."""
        if h <= 0.0:
            return
        inv_h = 1.0 / h
        room = self.room_k
        if self.chamber_fixed_k is not None:
            self.chamber_k = self.chamber_fixed_k
        tc = self.chamber_k
        wall = self.wall
        # Casing to room: convection plus radiation, linearised about the casing temperature;
        # it moves slowly, so the linearisation (and the lining's cached elimination) is
        # renewed only when the casing has moved by a tenth of a kelvin.
        to = wall.temps[-1]
        if abs(to - self._casing_linearised_k) > 0.1:
            self._casing_linearised_k = to
            wall.end_g = self.casing_area_m2 * (
                self.casing_h + self.casing_eps * SIGMA * (to * to + room * room) * (to + room)
            )
        rad_room = SIGMA * (tc * tc + room * room) * (tc + room)
        vent_g = self.leak_area_m2 * rad_room
        if self.door_open:
            vent_g += self.door_area_m2 * (rad_room + DOOR_CONVECTION_W_M2K)
        pw, qw = wall.eliminate(inv_h, room)
        num = self.chamber_cap_total * inv_h * tc + heater_w + vent_g * room + wall.attach_g * pw
        den = self.chamber_cap_total * inv_h + vent_g + wall.attach_g * (1.0 - qw)
        load = self.load
        if load is not None:
            ts = load.temps[0]
            if self.foil:
                load.g[0] = self._gap_g(ts, load.temps[1])
                load.invalidate()
            load.attach_g = self.load_exchange_m2 * (
                self.load_h + self.load_eps * SIGMA * (tc * tc + ts * ts) * (tc + ts)
            )
            pl, ql = load.eliminate(inv_h, room)
            num += load.attach_g * pl
            den += load.attach_g * (1.0 - ql)
        if self.chamber_fixed_k is not None:
            new_tc = self.chamber_fixed_k
        else:
            new_tc = num / den
        self.chamber_k = new_tc
        wall.substitute(new_tc)
        if load is not None:
            load.substitute(new_tc)
        self.loss_w = vent_g * (new_tc - room) + wall.end_g * (wall.temps[-1] - room)
        self.energy_in_j += heater_w * h
        self.energy_lost_j += self.loss_w * h

    def stored_energy_j(self) -> float:
        """Heat stored above room temperature (for energy-balance checks)."""
        room = self.room_k
        total = self.chamber_cap_total * (self.chamber_k - room)
        for chain in (self.wall, self.load):
            if chain is not None:
                total += sum(c * (t - room) for c, t in zip(chain.cap, chain.temps, strict=True))
        return total

    # Convenience views in °C.
    @property
    def chamber_c(self) -> float:
        return self.chamber_k - KELVIN

    @property
    def load_surface_c(self) -> float | None:
        if self.load is None:
            return None
        return self.load.temps[self.load_surface_index] - KELVIN

    @property
    def foil_c(self) -> float | None:
        """The foil skin, when the plate is wrapped."""
        return self.load.temps[0] - KELVIN if self.load is not None and self.foil else None

    @property
    def load_core_c(self) -> float | None:
        return None if self.load is None else self.load.temps[-1] - KELVIN

    @property
    def casing_c(self) -> float:
        return self.wall.temps[-1] - KELVIN
