# factors: panel -> market liquidity, innovations, liquidity betas, traded factor, commonality (liqpanel.factors)
rule factors:
    input:
        panel=f"{WORK}/panel.parquet",
        daily=expand(f"{WORK}/daily/month={{month}}/daily.parquet", month=MONTHS),
        factors=[CONFIG["inputs"]["factors"]] if CONFIG["inputs"]["factors"] else [],
        truth=[CONFIG["inputs"]["truth"]] if CONFIG["inputs"]["truth"] else [],
    output:
        directory(f"{WORK}/factors"),
    params:
        factors=CONFIG["factors"],
        lags=CONFIG["models"].get("lags"),
    run:
        from liqpanel.factors.job import run_factors

        run_factors(input.panel, output[0], list(input.daily), inputs=SETTINGS.inputs, measures=SETTINGS.measures,
                    models=SETTINGS.models, factors=SETTINGS.factors)
