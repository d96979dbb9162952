# panel: monthly measures + public characteristics + next-month return (liqpanel.panel)
rule panel:
    input:
        monthly=f"{WORK}/monthly.parquet",
        daily=expand(f"{WORK}/daily/month={{month}}/daily.parquet", month=MONTHS),
        sources=[c["path"] for c in CONFIG["inputs"]["characteristics"]]
        + ([CONFIG["inputs"]["returns"]] if CONFIG["inputs"]["returns"] else [])
        + expand_inputs("securities") + expand_inputs("fx"),
    output:
        panel=f"{WORK}/panel.parquet",
        audit=f"{WORK}/characteristics_audit.parquet",
    params:
        panel=CONFIG["panel"],
        characteristics=CONFIG["inputs"]["characteristics"],
        markets=CONFIG.get("markets"),
    run:
        from liqpanel.panel.job import run_panel

        run_panel(input.monthly, list(input.daily), output.panel, output.audit, inputs=SETTINGS.inputs,
                  market=SETTINGS.market, panel=SETTINGS.panel)
