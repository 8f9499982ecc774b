/*
 * plyledger.h - the whole public API of libplyledger.
 *
 * plyledger keeps the non-destructive inspection record of composite
 * airframes: reduced inspection maps keyed by airframe serial, site and
 * part coordinates, in one SQLite store. Include this header, or the
 * module headers it lists, and link with `pkg-config --libs plyledger`.
 */
#ifndef PLYLEDGER_H
#define PLYLEDGER_H

#include "plyledger/common.h"
#include "plyledger/version.h"
#include "plyledger/hash.h"
#include "plyledger/sign.h"
#include "plyledger/outfile.h"
#include "plyledger/npy.h"
#include "plyledger/map.h"
#include "plyledger/render.h"
#include "plyledger/plot.h"
#include "plyledger/store.h"
#include "plyledger/store_row.h"
#include "plyledger/plan.h"
#include "plyledger/record.h"
#include "plyledger/history.h"
#include "plyledger/seq.h"
#include "plyledger/sim.h"
#include "plyledger/reduce.h"
#include "plyledger/register.h"
#include "plyledger/detect.h"
#include "plyledger/criteria.h"
#include "plyledger/change.h"
#include "plyledger/compare.h"
#include "plyledger/ledger.h"
#include "plyledger/package.h"
#include "plyledger/people.h"
#include "plyledger/disposition.h"
#include "plyledger/track.h"
#include "plyledger/coverage.h"
#include "plyledger/report.h"

#endif
