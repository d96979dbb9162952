# report: everything -> results/<run-id>/ (liqpanel.report)
# `make report` (snakemake --report) turns the tables and figures marked here
# into one HTML file; each gets its caption from the run's manifest, and a
# table shows as printed (tables/<name>.html: caption, table, notes).
report: "../report/workflow.rst"


rule report:
    input:
        monthly=f"{WORK}/monthly.parquet",
        panel=f"{WORK}/panel.parquet",
        characteristics_audit=f"{WORK}/characteristics_audit.parquet",
        audit=[f"{WORK}/audit.parquet"] if FROM_TRADES else [],
        daily_audit=[] if FROM_TRADES else [f"{WORK}/daily_audit.parquet", f"{WORK}/daily_splits.parquet"],
        models=f"{WORK}/models",
        factors=f"{WORK}/factors",
        truth=[CONFIG["inputs"]["truth"]] if CONFIG["inputs"]["truth"] else [],
        study=[f"{WORK}/study"] if CONFIG["study"]["in_report"] else [],
    output:
        report(
            directory(f"{RESULTS}/{RUN_ID}"),
            patterns=["tables/{table}.html", "figures/{figure}.png"],
            caption="../report/result.rst",
            category=report_category,
            labels=report_labels,
        ),
    run:
        from liqpanel.report.job import run_report

        run_report(
            RUN_ID,
            output[0],
            monthly_path=input.monthly,
            panel_path=input.panel,
            audit_path=input.audit[0] if input.audit else None,
            daily_audit_paths=list(input.daily_audit) or None,
            characteristics_audit_path=input.characteristics_audit,
            models_dir=input.models,
            factors_dir=input.factors,
            started=STARTED,
            command=COMMAND,
            study_dir=input.study[0] if input.study else None,
            settings=SETTINGS,
        )
