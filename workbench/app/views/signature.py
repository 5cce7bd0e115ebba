import streamlit as st

st.title("signature")
