# nightjar — build, test, demo, bench.  `make help` lists the targets.
CC       ?= gcc
# `make MPI=1`: ./nightjar with data-parallel training over Open MPI (mpicc;
# objects in build/mpi).  The default build has no MPI.
ifeq ($(MPI),1)
CC       := mpicc
B        := build/mpi
MPIFLAGS := -DNJ_MPI
endif
# Tuned for the build machine by default; `make PORTABLE=1` builds for any x86-64.
ifeq ($(PORTABLE),1)
ARCH     := -march=x86-64 -mtune=generic
else
ARCH     := $(shell $(CC) -march=native -E -x c /dev/null >/dev/null 2>&1 && echo -march=native || echo -march=x86-64)
endif
OPT      ?= -O2
CFLAGS   ?= $(OPT) $(ARCH) -g
CFLAGS   += -std=c11 -Wall -Wextra -fopenmp -D_POSIX_C_SOURCE=200809L -D_DEFAULT_SOURCE \
            -I. -I/usr/include/stb -MMD -MP $(MPIFLAGS)
LDLIBS   += -lopenblas -lcjson -lstb -lm -fopenmp
B        ?= build
FLAVOUR  := $(if $(MPIFLAGS),mpi,plain)

LIB_SRC  := $(wildcard nn/*.c losses/*.c data/*.c) $(filter-out train/main.c,$(wildcard train/*.c))
LIB_OBJ  := $(LIB_SRC:%.c=$(B)/%.o)
TEST_SRC := $(wildcard tests/test_*.c)
TEST_BIN := $(TEST_SRC:tests/%.c=$(B)/tests/%)
TEST_SUP := $(filter-out $(TEST_SRC),$(wildcard tests/*.c))
TEST_SUP_OBJ := $(TEST_SUP:%.c=$(B)/%.o)

.PHONY: all deps deps-test test mpi-test-build bench bench-nn bench-losses bench-data bench-export bench-mpi \
        demo clean help
# keep object files of test programs (no trailing "rm" after the summary line)
.SECONDARY:
all: deps nightjar

deps:
	@sh tools/deps.sh build
deps-test:
	@sh tools/deps.sh test

$(B)/%.o: %.c
	@mkdir -p $(dir $@)
	$(CC) $(CFLAGS) -c $< -o $@

$(B)/libnightjar.a: $(LIB_OBJ)
	@rm -f $@
	ar rcs $@ $^

# build/flavour names the build ./nightjar was linked from (plain or mpi), so
# switching between `make` and `make MPI=1` relinks it.
# (The sub-make for build/mpi/nightjar leaves it alone: NJ_KEEP_FLAVOUR.)
ifndef NJ_KEEP_FLAVOUR
$(shell mkdir -p build; [ "$$(cat build/flavour 2>/dev/null)" = "$(FLAVOUR)" ] || echo $(FLAVOUR) > build/flavour)
endif
nightjar: $(B)/train/main.o $(B)/libnightjar.a build/flavour
	$(CC) $(CFLAGS) $(filter %.o %.a,$^) -o $@ $(LDLIBS)

# The MPI build the tests and bench-mpi use, without touching ./nightjar:
# build/mpi/nightjar (only when mpicc exists; tests/test_mpi.c says why it
# skips otherwise).
build/mpi/nightjar: build/mpi/train/main.o build/mpi/libnightjar.a
	$(CC) $(CFLAGS) $^ -o $@ $(LDLIBS)
mpi-test-build:
	@if command -v mpicc >/dev/null 2>&1; then $(MAKE) --no-print-directory MPI=1 NJ_KEEP_FLAVOUR=1 build/mpi/nightjar; \
	else echo "mpicc not found: the MPI tests will be skipped (tools/deps.sh test installs Open MPI)"; fi

$(B)/tests/%: $(B)/tests/%.o $(TEST_SUP_OBJ) $(B)/libnightjar.a
	$(CC) $(CFLAGS) $^ -o $@ $(LDLIBS)

test: deps-test nightjar $(TEST_BIN)
	@$(MAKE) --no-print-directory mpi-test-build
	@sh tests/run.sh $(B)/tests

$(B)/bench/%: $(B)/bench/%.o $(B)/libnightjar.a
	$(CC) $(CFLAGS) $^ -o $@ $(LDLIBS)

bench-nn: deps $(B)/bench/bench_nn
	@$(B)/bench/bench_nn

bench-losses: deps $(B)/bench/bench_losses
	@$(B)/bench/bench_losses

bench-data: deps $(B)/bench/bench_data
	@$(B)/bench/bench_data

bench-export: deps nightjar $(B)/bench/bench_export
	@$(B)/bench/bench_export

bench-mpi: deps nightjar
	@$(MAKE) --no-print-directory mpi-test-build
	@sh bench/bench_mpi.sh

bench: bench-nn bench-losses bench-data bench-export bench-mpi

demo: deps nightjar
	@sh tools/demo.sh

clean:
	rm -rf $(B) nightjar

help:
	@echo "make            build ./nightjar"
	@echo "make test       build and run the whole test suite"
	@echo "make demo       the main job end to end on generated data"
	@echo "make bench      speed figures (never part of the tests)"
	@echo "make clean      remove build output"
	@echo "make PORTABLE=1 build without -march=native"
	@echo "make MPI=1      build ./nightjar with data-parallel training over Open MPI (mpirun)"

-include $(shell find $(B) -name '*.d' 2>/dev/null)
