/* Umbrella header: the whole public API of the tankfit library. */
#ifndef TANKFIT_TANKFIT_H
#define TANKFIT_TANKFIT_H
#include <tankfit/error.h>
#include <tankfit/types.h>
#include <tankfit/stats.h>
#include <tankfit/capture.h>
#include <tankfit/import.h>
#include <tankfit/design.h>
#include <tankfit/roles.h>
#include <tankfit/segment.h>
#include <tankfit/fit.h>
#include <tankfit/spectrum.h>
#include <tankfit/analysis.h>
#include <tankfit/synth.h>
#include <tankfit/synth_output.h>
#endif
