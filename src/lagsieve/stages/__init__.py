"""The pipeline's stages as plain functions of files, one module per stage, so that a job
imports only what its stage uses: :mod:`.plan` (what the Snakefile needs at parse time),
:mod:`.check` (a study and its inputs checked), :mod:`.condition`, :mod:`.screen`,
:mod:`.evidence` (align and evidence), :mod:`.report`; :mod:`.common` holds what they share.

Each stage reads files, calls the modules of the layers below, and writes its outputs
atomically (temporary name, then rename). The Snakemake scripts are one call each. This
package imports nothing itself: ``import lagsieve.stages.screen`` costs the screen's imports
only.
"""
