"""The demo recipe: one TOML document that runs every analysis kind on the three invented
studies of :mod:`sensiv.demo.generators` (written as ``examples/demo.toml``)."""

from __future__ import annotations

from sensiv.demo.generators import published_table

DEMO_RECIPE = """\
# sensiv demo recipe. Every data set here is INVENTED (sensiv.demo); no real place or study.
title = "sensiv demo: three invented studies"
seed = 20261201

[[study]]
name = "irrigation"
description = "INVENTED data: irrigation and maize yield on 3000 plots of an invented river district; instrument: height above the canal intake. True effect 0.012 t/ha per hour; true direct effect of height -0.003 t/ha per metre."
[study.data]
path = "{data}irrigation.csv"
outcome = "maize_yield"
treatments = ["irrigation_hours"]
instruments = ["height_m"]
controls = ["plot_ha", "soil"]
cluster = "village"
[study.labels]
maize_yield = "Maize yield (t/ha)"
irrigation_hours = "Irrigation (hours)"
height_m = "Height above the intake (m)"
[study.inference]
se = "cluster"
[[study.analysis]]
kind = "fit"
[[study.analysis]]
kind = "sweep"
direct = ["-0.005:0.005"]
label = "direct effect of height within +-0.005 t/ha per metre"
[[study.analysis]]
kind = "prior"
prior = ["normal:0:0.003"]
[[study.analysis]]
kind = "corrbound"
max_ratio = 0.1
reps = 199
[[study.analysis]]
kind = "calibrate"

[[study]]
name = "nudge"
description = "INVENTED data: a randomised text message (sms) nudging 4000 patients of an invented clinic to a blood-pressure screening; outcome: blood pressure under control. True effect 0.15; true direct effect of the message 0.02."
[study.data]
path = "{data}nudge.csv"
outcome = "bp_controlled"
treatments = ["screened"]
instruments = ["sms"]
[study.labels]
bp_controlled = "Blood pressure controlled"
screened = "Screened"
sms = "Text message"
[study.inference]
se = "robust"
[[study.analysis]]
kind = "fit"
[[study.analysis]]
kind = "sweep"
direct = ["-0.03:0.03"]
label = "direct effect of the message within +-0.03"
[[study.analysis]]
kind = "discrete"
budget = 0.05
reps = 199

[[study]]
name = "published"
description = "INVENTED published table (examples/published_table.json): a lottery for rural-road funds in 212 districts; only the printed numbers are known."
[[study.analysis]]
kind = "published"
estimate = {estimate}
se = {se}
first_stage = {first_stage}
first_stage_se = {first_stage_se}
reduced_form = {reduced_form}
reduced_form_se = {reduced_form_se}
n = {n}
direct = ["-0.25:0.25rf"]
prior = ["normal:0:0.5"]
"""


def demo_recipe(data_prefix: str = "") -> str:
    """The demo recipe (TOML) over the three invented scenarios; data paths get ``data_prefix``.

    Examples
    --------
    >>> "published" in demo_recipe()
    True
    """
    table = published_table()
    return DEMO_RECIPE.format(data=data_prefix, **{k: v for k, v in table.items()
                                                   if k not in ("invented", "description")})
