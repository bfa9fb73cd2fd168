# nightjar — build, test, demo, bench.  `make help` lists the targets.
CC       ?= gcc
# Tuned for the build machine by default; `make PORTABLE=1` builds for any x86-64.
ifeq ($(PORTABLE),1)
ARCH     := -march=x86-64 -mtune=generic
else
ARCH     := $(shell $(CC) -march=native -E -x c /dev/null >/dev/null 2>&1 && echo -march=native || echo -march=x86-64)
endif
OPT      ?= -O2
CFLAGS   ?= $(OPT) $(ARCH) -g
CFLAGS   += -std=c11 -Wall -Wextra -fopenmp -D_POSIX_C_SOURCE=200809L -D_DEFAULT_SOURCE \
            -I. -I/usr/include/stb -MMD -MP
LDLIBS   += -lopenblas -lcjson -lstb -lm -fopenmp
B        := build

LIB_SRC  := $(wildcard nn/*.c losses/*.c data/*.c) $(filter-out train/main.c,$(wildcard train/*.c))
LIB_OBJ  := $(LIB_SRC:%.c=$(B)/%.o)
TEST_SRC := $(wildcard tests/test_*.c)
TEST_BIN := $(TEST_SRC:tests/%.c=$(B)/tests/%)
TEST_SUP := $(filter-out $(TEST_SRC),$(wildcard tests/*.c))
TEST_SUP_OBJ := $(TEST_SUP:%.c=$(B)/%.o)

.PHONY: all deps deps-test test bench bench-recipe bench-nn bench-losses bench-data bench-export demo clean help
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

$(B)/%.o: %.c
	@mkdir -p $(dir $@)
	$(CC) $(CFLAGS) -c $< -o $@

$(B)/libnightjar.a: $(LIB_OBJ)
	@rm -f $@
	ar rcs $@ $^

nightjar: $(B)/train/main.o $(B)/libnightjar.a
	$(CC) $(CFLAGS) $^ -o $@ $(LDLIBS)

$(B)/tests/%: $(B)/tests/%.o $(TEST_SUP_OBJ) $(B)/libnightjar.a
	$(CC) $(CFLAGS) $^ -o $@ $(LDLIBS)

test: deps-test nightjar $(TEST_BIN)
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

# nightjar vs an independent PyTorch implementation of the same recipe (issue #7)
bench-recipe: deps-test nightjar $(B)/bench/bench_data
	@/usr/bin/python3 bench/side_by_side.py

bench: bench-recipe bench-nn bench-losses bench-data bench-export

demo: deps nightjar
	@sh tools/demo.sh

clean:
	rm -rf $(B) nightjar

help:
	@echo "make            build ./nightjar"
	@echo "make test       build and run the whole test suite"
	@echo "make demo       the main job end to end on generated data"
	@echo "make bench      speed figures (never part of the tests)"
	@echo "make bench-recipe  nightjar vs PyTorch training step, side by side"
	@echo "make clean      remove build output"
	@echo "make PORTABLE=1 build without -march=native"

-include $(shell find $(B) -name '*.d' 2>/dev/null)
