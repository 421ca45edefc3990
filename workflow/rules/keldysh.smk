# Stage 0: the Rytova-Keldysh reduced binding table: the shipped one when it matches the code
# and libraries at hand (see the adapter), else built here once and cached.


rule keldysh_table:
    input:
        code=code_files("keldysh_table"),
        shipped=shipped_data("keldysh_table.npz"),
        shipped_build=shipped_data("keldysh_table.json"),
    output:
        table="results/cache/keldysh_table.npz",
    log:
        "results/logs/keldysh_table/keldysh_table.log",
    benchmark:
        "results/benchmarks/keldysh_table/keldysh_table.tsv"
    # the grid points are independent: solved in parallel on up to 4 cores (fewer if fewer given)
    threads: 4
    conda:
        "../../envs/lamellume.yaml"
    shell:
        adapter(
            "keldysh_table",
            inputs=("shipped", "shipped_build"),
            outputs=("table",),
        )
