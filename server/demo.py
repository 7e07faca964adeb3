"""Demo data: an invented product with three boards, a dozen switched rails and invented MOSFETs.

The scenario is made up for the demo: "Lanternfish", an outdoor edge gateway for a
fictional fleet of tidal-energy monitoring stations. The MOSFETs are invented; their
numbers are plausible for their class, not taken from any datasheet. One of them has Foster
stages fitted to an invented single-pulse Zth curve (junction to case), kept with its points. Some rails sit
comfortably inside their margins and some do not, so the pages show every verdict.

The sign-off is under way: some rails are submitted for review; reviewer ravi is assigned to
the power entry board, rosa took one rail of the compute carrier, and the rest of what awaits
review sits in the team queue, so each reviewer's home shows a queue.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from server.analysis.zth_fit import fit_zth
from server.models import Product
from server.services import catalog, parts, reviews, sequences, signoff, users
from server.services.access import Actor
from server.services.rail_edits import PartRef, create_rail

__all__ = ["DEMO_PASSWORD", "DEMO_USERS", "DEMO_TEAM", "seed", "seed_if_empty"]

DEMO_PASSWORD = "railsign-demo"
DEMO_TEAM = "gateway-power"
DEMO_USERS = [  # (username, role, display name)
    ("dana", "designer", "Dana Okafor"),
    ("ravi", "reviewer", "Ravi Lindqvist"),
    ("rosa", "reviewer", "Rosa Ibarra"),
    ("mona", "manager", "Mona Achterberg"),
    ("vic", "viewer", "Vic Tamura"),
    ("ada", "admin", "Ada Mbeki"),
]
# Rails the designer has submitted for review; (reviewer, board name) and (reviewer, rail name) assignments.
SUBMITTED = ("VIN_24V_HOTSWAP", "PSE_PORT_24V", "FAN_24V", "SOM_12V", "MODEM_12V", "LIDAR_12V", "CAMERA_12V")
BOARD_REVIEWERS = (("ravi", "Power entry"),)
RAIL_REVIEWERS = (("rosa", "SOM_12V"),)


def _soa_curves(vds_max: float, id_pulse: float, p_by_pulse: dict[float | None, float]) -> list[dict]:
    """Power-limited SOA lines I = P/V capped at the pulse current, from 0.1 V to vds_max."""
    curves = []
    for t_pulse, p_w in p_by_pulse.items():
        i_cap = id_pulse if t_pulse is not None and t_pulse <= 1e-3 else min(id_pulse, id_pulse * 0.4)
        knee = p_w / i_cap
        points = [[0.1, i_cap]]
        if 0.1 < knee < vds_max:
            points.append([round(knee, 4), i_cap])
        points.append([vds_max, round(min(i_cap, p_w / vds_max), 5)])
        curves.append({"t_pulse": t_pulse, "points": points})
    return curves


def _fet(name: str, vds_max: float, rds_on: float, id_pulse: float, rth_ja: float, zth: list[tuple[float, float]],
         p_by_pulse: dict[float | None, float], tj_max: float = 150.0) -> dict[str, Any]:
    return {"name": name, "vds_max": vds_max, "id_pulse_max": id_pulse, "rds_on": rds_on, "rds_on_alpha": 0.0045,
            "tj_max": tj_max, "rth_ja": rth_ja, "zth": [{"r": r, "tau": tau} for r, tau in zth],
            "soa": {"t_case": 25.0, "curves": _soa_curves(vds_max, id_pulse, p_by_pulse)}}


# Invented parts: "Brightwater" is the demo's own fictional component vendor.
FETS = [
    _fet("BW-N30L5 (demo)", 30.0, 5.2e-3, 180.0, 42.0,
         [(0.08, 15e-6), (0.45, 4e-4), (1.6, 6e-3), (7.0, 0.12), (32.87, 4.5)],
         {1e-4: 900.0, 1e-3: 260.0, 1e-2: 90.0, None: 45.0}),
    _fet("BW-N60H12 (demo)", 60.0, 11.5e-3, 160.0, 30.0,
         [(0.03, 30e-6), (0.15, 6e-4), (0.6, 1e-2), (4.0, 0.3), (25.22, 8.0)],
         {1e-4: 2400.0, 1e-3: 700.0, 1e-2: 220.0, 1e-1: 75.0, None: 45.0}),
    _fet("BW-N100H26 (demo)", 100.0, 26e-3, 80.0, 30.0,
         [(0.12, 25e-6), (0.6, 6e-4), (2.2, 1e-2), (5.5, 0.2), (21.58, 6.0)],
         {1e-4: 1300.0, 1e-3: 380.0, 1e-2: 130.0, None: 60.0}),
    _fet("BW-LS20S9 load switch (demo)", 20.0, 9e-3, 40.0, 70.0,
         [(0.3, 10e-6), (1.5, 3e-4), (5.0, 5e-3), (15.0, 0.1), (48.2, 3.0)],
         {1e-4: 250.0, 1e-3: 70.0, 1e-2: 22.0, None: 8.0}),
    {**_fet("BW-N60A10 avalanche rated (demo)", 60.0, 10e-3, 200.0, 32.0,
            [(0.04, 25e-6), (0.2, 6e-4), (0.8, 1e-2), (4.5, 0.3), (26.5, 7.0)],
            {1e-4: 2600.0, 1e-3: 760.0, 1e-2: 240.0, 1e-1: 80.0, None: 45.0}),
     "e_avalanche": 0.12},
    # with its R_DS(on) maximum and normalised curve over temperature (invented, as the rest)
    {**_fet("BW-N60L4 (demo)", 60.0, 4.2e-3, 400.0, 28.0,
            [(0.02, 40e-6), (0.12, 8e-4), (0.5, 1.2e-2), (3.2, 0.35), (24.16, 9.0)],
            {1e-4: 3200.0, 1e-3: 950.0, 1e-2: 300.0, 1e-1: 100.0, None: 55.0}, tj_max=175.0),
     "rds_on_max": 5.4e-3, "rds_on_curve": [[-55.0, 0.6], [25.0, 1.0], [100.0, 1.42], [150.0, 1.72], [175.0, 1.9]]},
    # with its gate data, for a gate-driven turn-on (threshold, transconductance, capacitances: invented)
    {**_fet("BW-N30G4 gate-rated (demo)", 30.0, 4.1e-3, 200.0, 38.0,
            [(0.06, 15e-6), (0.4, 4e-4), (1.5, 6e-3), (6.5, 0.12), (29.9, 4.5)],
            {1e-4: 1000.0, 1e-3: 300.0, 1e-2: 100.0, None: 48.0}),
     "gate": {"v_th": 2.6, "g_fs": 45.0, "i_gfs": 20.0, "c_iss": 3.1e-9, "c_rss": 0.16e-9}},
]


# An invented single-pulse Zth curve (junction to case) of a 40 V part in a 5 x 6 mm package, as read off a
# datasheet chart: three points a decade, three significant digits; R_th(j-c) about 1.1 K/W.
FITTED_ZTH_POINTS = [
    [1e-5, 0.0185], [2e-5, 0.0290], [5e-5, 0.0520], [1e-4, 0.0790], [2e-4, 0.117], [5e-4, 0.191],
    [1e-3, 0.267], [2e-3, 0.362], [5e-3, 0.515], [1e-2, 0.640], [2e-2, 0.770], [5e-2, 0.920],
    [0.1, 1.00], [0.2, 1.06], [0.5, 1.09], [1.0, 1.10],
]
FITTED_RTH_JA = 38.0  # K/W as mounted on the demo board (invented)


def _fitted_fet() -> dict[str, Any]:
    """The demo part whose Foster stages are fitted (5 stages, largest error 1.3 % over the points, and the
    board stage with its default time constant) to `FITTED_ZTH_POINTS`; the points are kept in the part."""
    fit = fit_zth(FITTED_ZTH_POINTS, 5, rth_ja=FITTED_RTH_JA)
    fet = _fet("BW-N40F7 fitted Zth (demo)", 40.0, 7.5e-3, 150.0, FITTED_RTH_JA, list(fit.all_stages),
               {1e-4: 1100.0, 1e-3: 330.0, 1e-2: 110.0, None: 40.0}, tj_max=175.0)
    fet["zth_points"] = [list(p) for p in FITTED_ZTH_POINTS]
    return fet


FETS.append(_fitted_fet())  # last, so that the rails' part indices above stay as they are


def _timer(c: float, *, retry_off: float | None = None) -> dict[str, Any]:
    t = {"c": c, "c_tol": 0.1, "i_charge": 10e-6, "i_charge_tol": 0.15, "v_trip": 1.2, "v_trip_tol": 0.03,
         "after_fault": "retry" if retry_off else "latch"}
    if retry_off:
        t["retry_off"] = retry_off
    return t


def _rail(name: str, supply: dict, load: dict, switch: dict, t_ambient: float, path: dict | None = None) -> dict:
    return {"schema": "railsign.rail/1", "name": name, "supply": supply, "path": path or {"r": 4e-3, "l": 15e-9},
            "load": load, "switch": switch, "environment": {"t_ambient": t_ambient}}


SUPPLY_24 = {"v_min": 18.0, "v_nom": 24.0, "v_max": 32.0, "r_source": 0.05, "l_source": 1e-6, "i_max": 12.0,
             "uvlo": 16.0, "c_in": 47e-6}
SUPPLY_12 = {"v_min": 11.4, "v_nom": 12.0, "v_max": 12.6, "r_source": 0.015, "l_source": 200e-9, "i_max": 15.0,
             "uvlo": 10.0, "c_in": 47e-6}
# a 24 V entry with its bulk capacitance upstream of the path and a 36 V TVS at the switch input
SUPPLY_24_CLAMPED = {"v_min": 18.0, "v_nom": 24.0, "v_max": 32.0, "r_source": 0.05, "l_source": 1e-6,
                     "i_max": 12.0, "uvlo": 16.0, "v_clamp": 36.0}
SUPPLY_5 = {"v_min": 4.75, "v_nom": 5.0, "v_max": 5.25, "r_source": 0.02, "l_source": 100e-9, "i_max": 6.0,
            "uvlo": 4.2, "c_in": 4.7e-6, "uvlo_filter": 2e-6}

# (board name, board revision, [(rail document, part index)])
BOARDS = [
    ("Power entry", "B", [
        (_rail("VIN_24V_HOTSWAP", SUPPLY_24,
               {"c_nom": 680e-6, "c_tol": 0.2, "esr": 0.02, "model": "constant_power", "i_nom": 0.5, "v_on": 17.0},
               {"mode": "power_limit", "t_on": 300e-6, "p_limit": 15.0, "i_limit": 9.0, "i_limit_tol": 0.1,
                "timer": _timer(680e-9)}, 60.0), 2),
        (_rail("PSE_PORT_24V", SUPPLY_24,
               {"c_nom": 100e-6, "c_tol": 0.2, "esr": 0.05, "model": "resistive", "i_nom": 0.6},
               {"mode": "current_limit", "t_on": 100e-6, "i_limit": 1.5, "i_limit_tol": 0.15,
                "timer": _timer(150e-9, retry_off=0.5)}, 60.0), 1),
        # two FETs of the one part in parallel (the rail's own figure, fet.count)
        ({**_rail("HEATER_24V", SUPPLY_24,
                  {"c_nom": 10e-6, "c_tol": 0.1, "esr": 0.1, "model": "resistive", "i_nom": 8.0},
                  {"mode": "hard", "t_on": 2e-3}, 60.0), "fet": {"count": 2}}, 5),
        (_rail("FAN_24V", SUPPLY_24,
               {"c_nom": 47e-6, "c_tol": 0.2, "esr": 0.2, "model": "constant_current", "i_nom": 0.5, "v_on": 8.0},
               {"mode": "slew", "t_on": 100e-6, "dvdt": 2000.0}, 60.0), 1),
        # an eFuse whose limit folds back from 4 A below 4 V across it to 1 A at 32 V
        (_rail("AUX_24V_FOLDBACK", SUPPLY_24,
               {"c_nom": 330e-6, "c_tol": 0.2, "esr": 0.03, "model": "constant_power", "i_nom": 0.8, "v_on": 16.0},
               {"mode": "current_limit", "t_on": 100e-6, "i_limit": 4.0, "i_limit_tol": 0.1,
                "foldback": [[4.0, 4.0], [20.0, 1.5], [32.0, 1.0]], "timer": _timer(220e-9)}, 60.0), 1),
    ]),
    ("Compute carrier", "A", [
        (_rail("SOM_12V", SUPPLY_12,
               {"c_nom": 680e-6, "c_tol": 0.2, "esr": 0.01, "model": "constant_power", "i_nom": 2.5, "v_on": 9.0},
               {"mode": "current_limit", "t_on": 200e-6, "i_limit": 7.0, "i_limit_tol": 0.1,
                "timer": _timer(33e-9, retry_off=0.4)}, 55.0), 1),
        (_rail("MODEM_12V", SUPPLY_12,
               {"c_nom": 470e-6, "c_tol": 0.2, "esr": 0.03, "model": "constant_power", "i_nom": 0.8, "v_on": 8.0},
               {"mode": "current_limit", "t_on": 200e-6, "i_limit": 3.0, "i_limit_tol": 0.1,
                "timer": _timer(68e-9)}, 55.0), 1),
        (_rail("SSD_12V", SUPPLY_12,
               {"c_nom": 220e-6, "c_tol": 0.2, "esr": 0.02, "model": "constant_current", "i_nom": 1.2, "v_on": 3.0},
               {"mode": "slew", "t_on": 100e-6, "dvdt": 6000.0}, 55.0), 0),
        (_rail("USB_HUB_12V", SUPPLY_12,
               {"c_nom": 150e-6, "c_tol": 0.2, "esr": 0.02, "model": "none"},
               {"mode": "hard", "t_on": 1e-3}, 55.0), 0),
        # a charge pump driving the gate through an external gate capacitor: the output slews at
        # about i_gate / (C_rss + c_ext) = 20 uA / 22.16 nF, 0.9 V/ms
        (_rail("ACCEL_12V_GATE", SUPPLY_12,
               {"c_nom": 1e-3, "c_tol": 0.2, "esr": 0.01, "model": "constant_current", "i_nom": 3.0, "v_on": 10.0},
               {"mode": "hard", "gate": {"drive": "current", "i_gate": 20e-6, "c_ext": 22e-9}}, 55.0), 6),
    ]),
    ("Sensor head", "C", [
        (_rail("LIDAR_12V", SUPPLY_12,
               {"c_nom": 4.7e-3, "c_tol": 0.2, "esr": 0.01, "model": "constant_power", "i_nom": 1.5, "v_on": 9.0},
               {"mode": "current_limit", "t_on": 200e-6, "i_limit": 2.5, "i_limit_tol": 0.1,
                "timer": _timer(47e-9)}, 70.0), 0),
        (_rail("CAMERA_12V", SUPPLY_12,
               {"c_nom": 330e-6, "c_tol": 0.2, "esr": 0.02, "model": "resistive", "i_nom": 0.9},
               {"mode": "power_limit", "t_on": 200e-6, "p_limit": 8.0, "i_limit": 2.0, "i_limit_tol": 0.1,
                "timer": _timer(150e-9)}, 70.0), 0),
        (_rail("SENSORS_5V", SUPPLY_5,
               {"c_nom": 100e-6, "c_tol": 0.2, "esr": 0.03, "model": "resistive", "i_nom": 0.4},
               {"mode": "slew", "t_on": 100e-6, "dvdt": 5000.0}, 70.0), 3),
        (_rail("IR_LED_5V", SUPPLY_5,
               {"c_nom": 22e-6, "c_tol": 0.1, "esr": 0.05, "model": "constant_current", "i_nom": 1.0, "v_on": 2.5},
               {"mode": "hard", "t_on": 500e-6}, 70.0), 3),
        # the 24 V accessory port: an eFuse with a fast trip, a 3 µs current loop and three retries before it latches
        (_rail("ACCESSORY_24V", SUPPLY_24_CLAMPED,
               {"c_nom": 100e-6, "c_tol": 0.2, "esr": 0.03, "model": "resistive", "i_nom": 1.5},
               {"mode": "current_limit", "t_on": 100e-6, "i_limit": 4.0, "i_limit_tol": 0.1,
                "loop_response": 3e-6, "fast_trip": 18.0, "fast_trip_delay": 400e-9,
                "timer": {**_timer(22e-9, retry_off=1.0), "retries": 3}}, 60.0), 4),
        # the gimbal's bank (invented): two electrolytics, two dozen X7R ceramics whose capacitance falls to 45 %
        # at 12 V (an invented DC-bias curve), and eight X5R ceramics with no curve
        (_rail("GIMBAL_12V", SUPPLY_12,
               {"model": "constant_power", "i_nom": 1.2, "v_on": 9.0, "bank": [
                   {"refs": "C401, C402", "count": 2, "c_nom": 330e-6, "c_tol": 0.2, "dielectric": "electrolytic",
                    "v_rated": 25.0, "esr": 0.08},
                   {"refs": "C410-C433", "count": 24, "c_nom": 22e-6, "c_tol": 0.1, "dielectric": "x7r",
                    "v_rated": 25.0, "esr": 0.004,
                    "dc_bias": [[0.0, 1.0], [4.0, 0.85], [8.0, 0.62], [12.0, 0.45], [16.0, 0.36], [25.0, 0.25]]},
                   {"refs": "C440-C447", "count": 8, "c_nom": 4.7e-6, "c_tol": 0.1, "dielectric": "x5r",
                    "v_rated": 16.0, "esr": 0.008},
               ]},
               {"mode": "current_limit", "t_on": 200e-6, "i_limit": 3.0, "i_limit_tol": 0.1,
                "timer": _timer(100e-9)}, 70.0), 1),
    ]),
]


# The sensor head's power-up sequence (invented): a 12 V harness down the mast, long and thin (0.4 ohm), and a
# 5 V auxiliary. The lidar's 4.7 mF start pulls the harness below the 10.5 V UVLO of the head's converter at the
# supply-low corner, and its fault timer (too short for that capacitance, as its own analysis says) turns it off
# before power-good, so the camera it enables never starts; the 5 V side stays within its budget.
SEQUENCES = {
    "Sensor head": {
        "schema": "railsign.sequence/1", "name": "Sensor head power-up",
        "supplies": [
            {"id": "harness12", "name": "12 V harness down the mast", "v_nom": 12.0, "v_min": 11.4, "r_source": 0.4,
             "l_source": 2e-6, "c_bus": 220e-6, "i_max": 4.0, "uvlo": [10.5]},
            {"id": "aux5", "name": "5 V auxiliary", "v_nom": 5.0, "v_min": 4.75, "r_source": 0.05, "i_max": 3.0},
        ],
        "rails": [
            {"id": "lidar", "ref": "LIDAR_12V", "supply": "harness12", "power_good": 0.9, "enable": {"at": 0.0}},
            {"id": "camera", "ref": "CAMERA_12V", "supply": "harness12",
             "enable": {"after": "lidar", "threshold": 0.85, "delay": 5e-3}},
            {"id": "sensors", "ref": "SENSORS_5V", "supply": "aux5", "enable": {"at": 1e-3}},
            {"id": "ir_led", "ref": "IR_LED_5V", "supply": "aux5",
             "enable": {"after": "sensors", "threshold": 0.9, "delay": 1e-3}},
        ],
    },
}


def seed(session: Session) -> dict[str, int]:
    """Create the demo team, users, parts, product, boards and rails. Returns counts."""
    system = Actor.system("railsign-demo")
    for username, role, display in DEMO_USERS:
        users.create_user(session=session, actor=system, username=username, role=role, password=DEMO_PASSWORD,
                          display_name=display, teams=[DEMO_TEAM])
    designer = Actor.for_user(users.get_user_by_name(session=session, username="dana"))
    part_ids = [parts.create_part(session=session, actor=designer, document=fet,
                                  message="entered from the demo vendor's sheet").part_id for fet in FETS]
    product = catalog.create_product(session=session, actor=designer, name="Lanternfish edge gateway",
                                     description="Outdoor gateway for a fleet of tidal-energy monitoring stations "
                                                 "(an invented demo product).")
    count = 0
    boards, rails = {}, {}
    for board_name, revision, rail_specs in BOARDS:
        board = catalog.create_board(session=session, actor=designer, product_id=product.id, name=board_name,
                                     revision=revision)
        boards[board_name] = board.id
        for document, part_index in rail_specs:
            rail, rev = create_rail(session=session, actor=designer, board_id=board.id, document=document,
                                    part=PartRef(part_ids[part_index]), message="first entry")
            rails[document["name"]] = (rail.id, rev.sha256)
            count += 1
    for name in SUBMITTED:
        rail_id, sha256 = rails[name]
        signoff.take_transition(session=session, actor=designer, rail_id=rail_id, transition="submit for review",
                                sha256=sha256, comment="ready for a look at the margins")
    for board_name, document in SEQUENCES.items():
        sequences.save_sequence(session=session, actor=designer, board_id=boards[board_name], document=document,
                                message="first entry")
    manager = Actor.for_user(users.get_user_by_name(session=session, username="mona"))
    for username, board_name in BOARD_REVIEWERS:
        reviews.assign(session=session, actor=manager, reviewer_id=users.get_user_by_name(
            session=session, username=username).id, board_id=boards[board_name])
    for username, rail_name in RAIL_REVIEWERS:
        reviewer = Actor.for_user(users.get_user_by_name(session=session, username=username))
        reviews.assign(session=session, actor=reviewer, rail_id=rails[rail_name][0])
    return {"users": len(DEMO_USERS), "parts": len(FETS), "boards": len(BOARDS), "rails": count,
            "submitted": len(SUBMITTED)}


def seed_if_empty(session: Session) -> bool:
    """Seed when the database holds no product yet; True when it seeded."""
    if session.scalar(select(func.count()).select_from(Product)):
        return False
    seed(session)
    return True
