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
# the program the tests run (make sanitize builds its own in build-san/)
BIN      ?= nightjar
# SAN=1: AddressSanitizer + UndefinedBehaviorSanitizer, every error fatal
# FUZZ=1: objects for libFuzzer targets (clang), with ASan+UBSan
ifeq ($(FUZZ),1)
SANFLAGS := -fsanitize=fuzzer-no-link,address,undefined -fno-sanitize-recover=all -fno-omit-frame-pointer
CFLAGS   += $(SANFLAGS)
endif
ifeq ($(SAN),1)
SANFLAGS := -fsanitize=address,undefined -fno-sanitize-recover=all -fno-omit-frame-pointer
CFLAGS   += $(SANFLAGS)
LDLIBS   += $(SANFLAGS)
endif
FLAVOUR  := $(if $(MPIFLAGS),mpi,plain)

LIB_SRC  := $(wildcard nn/*.c nn/*/*.c losses/*.c data/*.c) $(filter-out train/cli/main.c,$(wildcard train/*/*.c))
LIB_OBJ  := $(LIB_SRC:%.c=$(B)/%.o)
TEST_SRC := $(wildcard tests/test_*.c)
TEST_BIN := $(TEST_SRC:tests/%.c=$(B)/tests/%)
TEST_SUP := $(filter-out $(TEST_SRC),$(wildcard tests/*.c))
TEST_SUP_OBJ := $(TEST_SUP:%.c=$(B)/%.o)
FUZZ_NAMES := $(filter-out fuzz_input,$(patsubst fuzz/%.c,%,$(wildcard fuzz/fuzz_*.c)))
FUZZ_SECONDS ?= 60
FUZZ_CC  ?= clang-14

.PHONY: all deps deps-test test sanitize fuzz mpi-test-build bench bench-recipe bench-nn bench-losses \
        bench-data bench-export bench-mpi bench-map demo clean help
# keep object files of test programs (no trailing "rm" after the summary line)
.SECONDARY:
all: deps nightjar

deps:
	@sh tools/deps.sh build
deps-test:
	@sh tools/deps.sh test

# the numeric kernels (ops and losses) get full loop vectorisation; measured
# on the training step (320x96 b4, 1 thread): CPU time per step −15..20%
$(B)/nn/%.o $(B)/losses/%.o: CFLAGS += -O3
# the direct conv kernels rely on fused multiply-adds (ISO C mode turns contraction off)
$(B)/nn/conv_direct.o: CFLAGS += -ffp-contract=fast
# sqrtf of a non-negative second moment never sets errno: without the errno
# call path the Adam loop vectorises (vsqrtps rounds exactly like sqrtf)
$(B)/nn/adam.o: CFLAGS += -fno-math-errno

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
$(BIN): $(B)/train/cli/main.o $(B)/libnightjar.a build/flavour
	$(CC) $(CFLAGS) $(filter %.o %.a,$^) -o $@ $(LDLIBS)

# The MPI build the tests and bench-mpi use, without touching ./nightjar:
# build/mpi/nightjar (only when mpicc exists; tests/test_mpi.c says why it
# skips otherwise).
ifeq ($(MPI),1)
$(B)/nightjar: $(B)/train/cli/main.o $(B)/libnightjar.a
	$(CC) $(CFLAGS) $^ -o $@ $(LDLIBS)
endif
mpi-test-build:
	@if command -v mpicc >/dev/null 2>&1; then $(MAKE) --no-print-directory MPI=1 NJ_KEEP_FLAVOUR=1 build/mpi/nightjar; \
	else echo "mpicc not found: the MPI tests will be skipped (tools/deps.sh test installs Open MPI)"; fi

$(B)/tests/%: $(B)/tests/%.o $(TEST_SUP_OBJ) $(B)/libnightjar.a
	$(CC) $(CFLAGS) $^ -o $@ $(LDLIBS)

test: deps-test $(BIN) $(TEST_BIN)
	@$(MAKE) --no-print-directory mpi-test-build
	@NJ_BIN=./$(BIN) sh tests/run.sh $(B)/tests

# The whole suite under ASan+UBSan in build-san/ (end-to-end training reduced
# by NJ_TEST_REDUCED=1).  Leak checking is on and needs no suppressions.
SAN_ENV := NJ_TEST_REDUCED=1 NJ_TEST_SANITIZED=1 ASAN_OPTIONS=detect_leaks=1:strict_string_checks=1 \
           UBSAN_OPTIONS=print_stacktrace=1:halt_on_error=1
sanitize: deps-test
	@$(MAKE) --no-print-directory B=build-san BIN=build-san/nightjar SAN=1 OPT=-O1 \
	    build-san/nightjar $(TEST_BIN:$(B)/%=build-san/%)
	@if command -v mpicc >/dev/null 2>&1; then $(MAKE) --no-print-directory MPI=1 SAN=1 OPT=-O1 B=build-san/mpi \
	    NJ_KEEP_FLAVOUR=1 build-san/mpi/nightjar; fi
	@$(SAN_ENV) NJ_BIN=./build-san/nightjar NJ_MPI_BIN=./build-san/mpi/nightjar sh tests/run.sh build-san/tests

$(B)/fuzzbin/%: $(B)/fuzz/%.o $(B)/fuzz/fuzz_input.o $(B)/libnightjar.a
	@mkdir -p $(dir $@)
	$(CC) $(CFLAGS) -fsanitize=fuzzer $^ -o $@ $(LDLIBS)

# Every fuzz target (fuzz/) for FUZZ_SECONDS each, one after the other;
# seeds from tests/fuzz_corpus/<target>/, crashes into build-fuzz/crashes/.
fuzz:
	@sh tools/deps.sh fuzz
	@$(MAKE) --no-print-directory B=build-fuzz CC=$(FUZZ_CC) FUZZ=1 OPT=-O1 \
	    $(FUZZ_NAMES:%=build-fuzz/fuzzbin/%)
	@sh tools/fuzz.sh build-fuzz $(FUZZ_SECONDS) $(FUZZ_NAMES)

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

# issue 23: fusion time per frame and peak memory, 200 frames at 5 cm voxels
bench-map: deps $(B)/bench/bench_map
	@$(B)/bench/bench_map

bench-mpi: deps nightjar
	@$(MAKE) --no-print-directory mpi-test-build
	@sh bench/bench_mpi.sh

# nightjar vs an independent PyTorch implementation of the same recipe (issue #7)
bench-recipe: deps-test nightjar $(B)/bench/bench_data
	@/usr/bin/python3 bench/side_by_side.py

bench: bench-recipe bench-nn bench-losses bench-data bench-export bench-map bench-mpi

demo: deps nightjar $(B)/bench/bench_map
	@sh tools/demo.sh

clean:
	rm -rf $(B) build-san build-fuzz nightjar

help:
	@echo "make            build ./nightjar"
	@echo "make test       build and run the whole test suite"
	@echo "make sanitize   the whole test suite under ASan+UBSan (build-san/)"
	@echo "make fuzz       every fuzz target for FUZZ_SECONDS (default 60) each"
	@echo "make demo       the main job end to end on generated data"
	@echo "make bench      speed figures (never part of the tests)"
	@echo "make bench-recipe  nightjar vs PyTorch training step, side by side"
	@echo "make clean      remove build output"
	@echo "make PORTABLE=1 build without -march=native"
	@echo "make MPI=1      build ./nightjar with data-parallel training over Open MPI (mpirun)"

-include $(shell find $(B) -name '*.d' 2>/dev/null)
