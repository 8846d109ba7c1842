/*
 * gloam/gloam.h -- the whole public interface of libgloam: from a
 * coronagraphic image sequence to detections and detection limits.
 */
#ifndef GLOAM_GLOAM_H
#define GLOAM_GLOAM_H

#include "gloam/core.h"
#include "gloam/io.h"
#include "gloam/subtract.h"
#include "gloam/geometry.h"
#include "gloam/inject.h"
#include "gloam/limits.h"
#include "gloam/inspect.h"
#include "gloam/sim.h"
#include "gloam/detect.h"
#include "gloam/align.h"
#include "gloam/vet.h"
#include "gloam/run.h"
#include "gloam/command.h"

#endif
