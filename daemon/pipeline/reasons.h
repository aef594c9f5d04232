// Forwarding header, kept only while daemon/core/station.cpp (being split)
// still includes it: the reason bits live in config/settings/reasons.h.
// TODO(issue 12): remove once station's parts include config/settings/reasons.h.
#pragma once

#include "config/settings/reasons.h"
