"""The demo generator writes the same bytes for the same seed and options.

The hashes below were taken from the single-module generator before it was split into the
``timeslice.demo`` package (world, records, files); the split must not change one byte. NetCDF
files carry the netCDF-C and HDF5 library versions in their bytes, so their hashes are compared
only under the library versions they were recorded with (CSV, JSON and GeoJSON always).
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import pytest

from timeslice import demo

#: netCDF-C and HDF5 library versions the NetCDF hashes were recorded with.
RECORDED_LIBS = ("4.10.1", "2.2.0")

#: generate() options of each recorded case.
CASES = {
    "default_tg": {"target_group": True},
    "r025": {"resolution": 0.25},
    "r05_s7_tg": {"resolution": 0.5, "seed": 7, "target_group": True},
}

#: SHA-256 of every written file, per case.
HASHES = {
    "default_tg": {
        "alder/21ka":
            "44be2e476d4e64fce72fd87f4c5c654a6904f50fb02eaa9a913f70deb786521e",
        "alder/6ka":
            "2009372b0d8a8921a28ce4f5076a106b0dc30c8912e6511e1bad6dcbcc32f2a5",
        "alder/baseline":
            "819096381736145ee918bd86aa7463cd23ea7be128acf3e0d837ba6190cab682",
        "alder/high-forcing_2041-2060":
            "c453c5ff2ca8b1bc27904be9f6753c15b641d81a9bbf7f02da30af72c08d06c7",
        "alder/high-forcing_2081-2100":
            "a3797e9546eba1d757e361e350af6982092ce5d507c03261dce7cbf07fa987b5",
        "alder/low-forcing_2041-2060":
            "9cf7603034f675e05f41244f7d6bf511e8629b691a5296318041c178bd088310",
        "alder/low-forcing_2081-2100":
            "cab261c57375a8b753c7081894b06969ae5045ef316c3db0248e6d35d6677606",
        "baseline":
            "686978ace9ea67aec54b554843b94fbc9ffc0a02b814e6c6ab48cdba429ea3b6",
        "birch/21ka":
            "b7e64928ea933c1f2a365f22ce6a25351eab6b1de78b5563dcd46f1eabf60cd3",
        "birch/6ka":
            "54816baf135cbf10f828f393a1daeb08f8b6f7e6ce1e208632c79176af05b8de",
        "birch/baseline":
            "550bc3e22288cd78cb4676164ff0ce072f5c152cecc0c7e161d3382f024ee8d4",
        "birch/high-forcing_2041-2060":
            "9e0555aec9b9371f5267c21f8caa3816a0f1c91a8c005e23d063b99741c049ce",
        "birch/high-forcing_2081-2100":
            "2b86ccd27fe874e4327e5b3e867ab354992dbe7f225f3cee589307ec35ae74bf",
        "birch/low-forcing_2041-2060":
            "7ff03e6821523f2bf65beae42af13570fe36f299cfba248a3a5792520078e26c",
        "birch/low-forcing_2081-2100":
            "1759b8c5f192760bf97da3e8c81d619fce6321cf72cf193e767eab3c67dd9a23",
        "cedar/21ka":
            "28168a0f70b8e67a085fbbdf7d47b5042741c8c7274d584581e989e8488ce16d",
        "cedar/6ka":
            "64eee6e7877a8ae07166f45a2d1df54cc25b226312e28a6d1379a472de3a51e7",
        "cedar/baseline":
            "5d6dbfea524978ec76931c5b9355fb4a18d3700fb62e44bc15245a0a4f074801",
        "cedar/high-forcing_2041-2060":
            "c7c3d59de83286d58bdbc8ac8f6fb170f7eb64af581c9daf98d61c2810528454",
        "cedar/high-forcing_2081-2100":
            "0c92b5453cb8e9a33e7f1a82ba0ea5bfbabc0d692cbbe86e02e224561fa1955e",
        "cedar/low-forcing_2041-2060":
            "43c5442d3a453702469a6a62bd53c1dc221bdc9564bd0d40451151d0897ad8dc",
        "cedar/low-forcing_2081-2100":
            "4f67cd1ce028658894eec28b1d800f83e518294f0db6b487e9fea5063d12c2f6",
        "dated_records":
            "6aaf8338157805b44037548a7140dae7b04233f1e7b481bf58a552f5e997fcb9",
        "dem":
            "37f8feb4590735dbbec64f2776300f419d5fafdc07936e3d3ac09dee5ca5ee2f",
        "host_plant":
            "6e33328144ff448272c92c63bf636925dad98f9f8aec3ef7816f413dae8eb920",
        "ice_21ka":
            "86532fbac13cf767a868870f32a21c105bc752bfc8ceac8283fdf7b23280c0a2",
        "occurrences":
            "01eee0c4ee9c596aaf32df52ebbdc545e3a512c395125c721e4e9f8a439eb8c6",
        "populations":
            "dc5b99db6ed2d243229898c85040cffa83a2ee2736f43996aafa1995bfb35e9c",
        "reserves":
            "8970da1e585746ccb7e538a0cd88f9c49dd466109d449a4a9d05fd02f1ae2ddd",
        "target_group":
            "ebc4b05cd7006353d61297410683376795af1128e24d726f9eeab6061c885a11",
        "truth":
            "22925bc4e8f324f7175d6af78a73f4644d0b0e2989fcfada21a7fdbd5c9f82ea",
    },
    "r025": {
        "alder/21ka":
            "aa9b695f636a49404a42949ec18839683ef62b58afc1e1a6ce8c7f6416964a2b",
        "alder/6ka":
            "e93352ae67e08cfdd4115e4c4d79e3616b21ea489a7bc19e83aa25b317ad15b5",
        "alder/baseline":
            "94a2dd28dc271589be31e3c6b1f10fe33af07a588fce12c3acea3566c0155c50",
        "alder/high-forcing_2041-2060":
            "a096556f3331b7a262b4cd5c292557246e8b3435f5c6cc988045256e2fee6374",
        "alder/high-forcing_2081-2100":
            "8c20b88c02733b47d9bac2c2cc5b003c6d7c897b77e344ba5e069c8e9c2d267e",
        "alder/low-forcing_2041-2060":
            "d0336acc969accef54edd0401ab234c92877ca80763076af2ac23a16aace9707",
        "alder/low-forcing_2081-2100":
            "7a3b0bce9b82ebbc51437088ca15ed1ac734a56943385becdb087219b5975bae",
        "baseline":
            "7ccd7b1ceb8a2f4768126e07bd4ec1cf25c312462fb82ae9f0e7fa6c4f1a6480",
        "birch/21ka":
            "9b863196b6669bca826a8f21d5e70c85fe2b55c35ee13b3b73183facc088dc40",
        "birch/6ka":
            "5f0e4d45fdec562b27023796abe3037e612342ba0db8268546273fd5effff017",
        "birch/baseline":
            "3ce3a8aa977cf0a71f456c57ed41beb25062ef246a2bdff45fa625a724e8c4a0",
        "birch/high-forcing_2041-2060":
            "122324cc2fb420133acedd1739cdbaa27c28bb0d7816e8256b1a3111617d2371",
        "birch/high-forcing_2081-2100":
            "e60239ab4c6d083e9d834f8654ca3d9e2926a0272bbdb13b0b58b3b251e6783c",
        "birch/low-forcing_2041-2060":
            "fcb0e9e6e69ee3da647756f77fb32b8ccc5c2a4b09a4d8d78a1ca3c38608976d",
        "birch/low-forcing_2081-2100":
            "814db9c35bbf93de4fd50c9a09e181412e54f79dbd8141449e8ab6d98225f88d",
        "cedar/21ka":
            "2c689cae1c76dc5c6268a6113dd32687364765b11bd2ed290cc69392635e6b65",
        "cedar/6ka":
            "94b8ada08da7482565b36efaf04121abae8d83252c21e729700de2e8638391bc",
        "cedar/baseline":
            "92e599334cc1a538644ef707f4b9546d87c09f693c99fc1f22c97f4f590f58b4",
        "cedar/high-forcing_2041-2060":
            "e9ee633e6b402c40e5cb4b909b97aca7f93802c7334311b91f2d73c41f4b53ef",
        "cedar/high-forcing_2081-2100":
            "158c8ee0d7307aaaf55d6584c68a1a418334af6caf185c97ef3bb746395dbae4",
        "cedar/low-forcing_2041-2060":
            "ed4fdef4f22355b8942ce01f9a4fd57659794da6b32f48fa0382534ab6dc1352",
        "cedar/low-forcing_2081-2100":
            "6fe116231783697a48f580975dd7ed437d7dd2868200016ef37e4b714a418e45",
        "dated_records":
            "f9e5990aeb088e1db809b2a29fd7794bda2d3de5fae89a7b321fa3318c8d0b88",
        "dem":
            "36a1bd74a7fa5f9ff458f1b4faad21a33e6b574c46d0b5c4a6e9edfa8a973a7b",
        "host_plant":
            "465a18b8789456f1b5237744e3c2c26cdb1d2563b213a5be5e05a80bfc389d25",
        "ice_21ka":
            "86532fbac13cf767a868870f32a21c105bc752bfc8ceac8283fdf7b23280c0a2",
        "occurrences":
            "20a20e694dcfb8611e03e88d56e92be31372c3e4285ceadd1b896ce8a96a5f3f",
        "populations":
            "320ae8c42e27fa8503acfae798b349806e18cef88412e6b750093297d595148d",
        "reserves":
            "8970da1e585746ccb7e538a0cd88f9c49dd466109d449a4a9d05fd02f1ae2ddd",
        "truth":
            "67dad5efa4e74ad32f7859023c300e2102aa5e036088086dc88fb4ea0f3bd656",
    },
    "r05_s7_tg": {
        "alder/21ka":
            "4a46a6f0be7897fe7b1115719be9d7467e8725b3626ec395e3b681cb9ae51845",
        "alder/6ka":
            "ce231cefaad2e566f2fb8716a2ff9f182e7d066c66439b35384e31aa5fa1a265",
        "alder/baseline":
            "2f543ad0dafc847b1ba134d9469b01f7b70861c881a183d88c05cb60c58b798a",
        "alder/high-forcing_2041-2060":
            "b10df4dcaf43fbaca37e2c6cd3d13af57d7cc975d09c1e659670ec04f58623b5",
        "alder/high-forcing_2081-2100":
            "c1ef1a39f8d3ba11ebd17b29908b4eb956a23f2c0c90a1321a1c22c957b8c1a6",
        "alder/low-forcing_2041-2060":
            "92ae76bec5e13479bed21c36e1ad68147e3ade47b997e9f6b8e3f48141764689",
        "alder/low-forcing_2081-2100":
            "0573fb989e34ac8ceed9a73d47ab0023a40e03662e8b79efbf25000ec9549b7f",
        "baseline":
            "1626843819d0fa98c57aae5f3eb21721bca626d7eeec37a4c5503e5cdbe93960",
        "birch/21ka":
            "5f05597dc79b19546077ae686b7daeeb76e8802444496d3f7d8924ce0a76f59b",
        "birch/6ka":
            "9417a3e7bc5f6ca49a6b08191e225906d7e140a50ba46dc0d97de0d64b7d74ae",
        "birch/baseline":
            "365d90d2458dd53d1e321608244b2adf9f0388dee157be848bc327a4bea19016",
        "birch/high-forcing_2041-2060":
            "fe23363d18aefda41cf5a2278e59461bb49ea674b853d32275adc6629023d9c0",
        "birch/high-forcing_2081-2100":
            "b4b1ed9229d7f79968752fe3294de166bd046e61ed1f0d679fe19e881e156ff2",
        "birch/low-forcing_2041-2060":
            "9bfe10004600cbf34f95f158c10d91603b3684190d77416a8f536e6d999024e4",
        "birch/low-forcing_2081-2100":
            "adc74f7c7bdb6f71fbe98c545b6ab435b3a6dd74dbbaecba7037d07d2e5934f3",
        "cedar/21ka":
            "8201a0fe64c695f908927d1c9151f1676cc12d275bc8021cb1fa957c29de151f",
        "cedar/6ka":
            "24b2067d9959a393ffd3caa033ff6643e651062d64adffa18d954c2b204e20c4",
        "cedar/baseline":
            "ad48a0b3c5b49ba8fbb7cf8df48f210ff9d0af87b5868454965d97fc0ef948fe",
        "cedar/high-forcing_2041-2060":
            "6a9891abeb8330d9a774f9a2b398e8005b08d9058f5bc57590dd77eb41c77d21",
        "cedar/high-forcing_2081-2100":
            "7dca74950a9f48c57cc09004ecdae8eb2ae5dfeee0d05ee4357fe1322082a93a",
        "cedar/low-forcing_2041-2060":
            "8c58564dd3b0f14403d7dc868d0917e6dbb8f8de6d9085dea63b1d86d30f7ac2",
        "cedar/low-forcing_2081-2100":
            "819c874d215e29ffaabfcef013ba01a9a83b92d1e8d24af44d49eb3fc927147b",
        "dated_records":
            "651aaac41d29b58a2cfeabab2e6dd9ad14fff8a2668feee4398e471b0e4aa0b6",
        "dem":
            "2db02112ce14c1ff6b4e09c53c572b91ac00ad246cb7952b4f5a9a769dd37f28",
        "host_plant":
            "bae7ac826642b4b33a0cd0dac3b78013d8d6c6be162cc7ecc92d87a663b14559",
        "ice_21ka":
            "c1b3311f64ffec443535f15653454d6eb682f6bf683bfa4968e00f2d37399644",
        "occurrences":
            "f8d8a067f558071d23f18607f1508c2e9374326ade381d21ac33dd0e4831497a",
        "populations":
            "1af43f6e1856bd4df52170b09569b8434ebfb542d520e98d3274319b25e8e274",
        "reserves":
            "e12b265510d24252ac6dbf19544602b09559ab31892213572620a11df5fa61cb",
        "target_group":
            "9476d3185bb32d1691fb420621b90ec8f864d48fd662a6cc6d1edc77598ce2bc",
        "truth":
            "4d3e87cafb2ba7be2a94ab0d4fd3cffeaa55aeaa25147f425ed073baa5de2ae6",
    },
}


def _libs() -> tuple[str, str]:
    import netCDF4

    return netCDF4.__netcdf4libversion__, netCDF4.__hdf5libversion__


@pytest.mark.parametrize("case", sorted(CASES))
def test_generated_bytes_unchanged(case, tmp_path):
    paths = demo.generate(tmp_path, **CASES[case])
    assert set(paths) == set(HASHES[case])
    same_libs = _libs() == RECORDED_LIBS
    changed = []
    for key, path in sorted(paths.items()):
        if Path(path).suffix == ".nc" and not same_libs:
            continue
        if hashlib.sha256(Path(path).read_bytes()).hexdigest() != HASHES[case][key]:
            changed.append(key)
    assert not changed, f"{case}: bytes changed in {changed}"
    if not same_libs:
        pytest.skip(f"NetCDF bytes not compared: libraries {_libs()} differ from the recorded "
                    f"{RECORDED_LIBS} (text files compared and equal)")


def test_sha256_of_matches_hashlib(tmp_path):
    """sha256_of is the plain SHA-256 of each file's bytes (hashlib reference)."""
    p = tmp_path / "a.txt"
    p.write_bytes(b"abc")
    # FIPS 180-2, appendix B.1: SHA-256("abc")
    assert demo.sha256_of({"a": p}) == {
        "a": "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"}
