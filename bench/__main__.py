"""``python -m bench``: run every benchmark and print its table."""

from bench import scale

if __name__ == "__main__":
    scale.main()
