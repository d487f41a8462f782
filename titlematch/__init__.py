"""titlematch: code job titles to occupations and link establishments to a business register.

The folders are the pipeline; imports flow one way, down this list:

``io``          reading and writing tables, rejects, checksummed artefacts, lexicons
``runtime``     streaming resumable runs, the Dask engine, progress and summaries
``normalize``   titles, employer names, addresses, phonetic keys, spelling correction
``coding``      classification codes, title dictionary, candidate search, features, the title coder
``measures``    accuracy, calibration and automation measures and their plots
``confidence``  training labels, the confidence model, routing (accept / refer), calibration end to end
``linking``     business register index, blocking, comparisons, the establishment linker
``review``      the coders' side: referral queue, feedback, disagreements
``reporting``   evaluation and drift reports
``datasets``    the invented demo scenario
``cli``         one module per sub-command

The main classes are importable from here; they load on first use, so ``import titlematch``
stays cheap for the command line.
"""
from importlib import import_module

__version__ = "0.1.0"

_EXPORTS = {
    "TitleCoder": "titlematch.coding.coder",
    "TitleDictionary": "titlematch.coding.dictionary",
    "ConfidenceModel": "titlematch.confidence.model",
    "calibrate": "titlematch.confidence.calibration",
    "EstablishmentLinker": "titlematch.linking.linker",
    "RegisterIndex": "titlematch.linking.register",
    "normalize_titles": "titlematch.normalize.title",
    "normalize_names": "titlematch.normalize.name",
    "normalize_addresses": "titlematch.normalize.address",
    "InputError": "titlematch.io",
    "ArtefactError": "titlematch.io.artefact",
}

__all__ = sorted(_EXPORTS) + ["__version__"]


def __getattr__(name: str):
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'titlematch' has no attribute {name!r}")
    value = getattr(import_module(module), name)
    globals()[name] = value
    return value


def __dir__():
    return __all__
