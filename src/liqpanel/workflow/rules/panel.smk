# panel: monthly measures + public characteristics + next-month return (liqpanel.panel)
rule panel:
    input:
        monthly=f"{WORK}/monthly.parquet",
        daily=expand(f"{WORK}/daily/month={{month}}/daily.parquet", month=MONTHS),
        sources=[c["path"] for c in CONFIG["inputs"]["characteristics"]]
        + ([CONFIG["inputs"]["returns"]] if CONFIG["inputs"]["returns"] else []),
    output:
        panel=f"{WORK}/panel.parquet",
        audit=f"{WORK}/characteristics_audit.parquet",
    params:
        panel=CONFIG["panel"],
        characteristics=CONFIG["inputs"]["characteristics"],
    run:
        stages.panel(CONFIG, input.monthly, list(input.daily), output.panel, output.audit)
